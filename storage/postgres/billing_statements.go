package postgres

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"sync"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// StatementSummary is a statement without its lines, for listings.
type StatementSummary struct {
	ID          string                     `json:"id"`
	ProjectID   string                     `json:"project_id"`
	PeriodStart time.Time                  `json:"period_start"`
	PeriodEnd   time.Time                  `json:"period_end"`
	Currency    string                     `json:"currency"`
	Status      scheduling.StatementStatus `json:"status"`
	ComputedAt  time.Time                  `json:"computed_at"`
	IssuedAt    *time.Time                 `json:"issued_at,omitempty"`
	TotalMinor  int64                      `json:"total_minor"`
}

// billableBookings reads a project's bookings starting in [from, to) with their
// usage, no-show mark, displacement, the minutes of a cancelled booking others booked
// after its cancellation (active bookings of one instrument never overlap, so the sum
// is their union), and the booking's own split.
func billableBookings(ctx context.Context, q querier, projectID string, from, to time.Time) ([]scheduling.BillableBooking, error) {
	// One row per booking and usage (NULL usage for a booking without), in booking
	// order: a flat join the planner can hash, with binary timestamps.
	const sql = `
SELECT b.id::text, b.instrument_id::text, b.user_id::text, b.kind, lower(b.during), upper(b.during), b.status, b.cancelled_at,
       b.displaced_by IS NOT NULL, n.booking_id IS NOT NULL,
       CASE WHEN b.status = 'cancelled' THEN coalesce((
           SELECT sum(extract(epoch FROM upper(b.during * c.during) - lower(b.during * c.during)))::bigint / 60
           FROM bookings c
           WHERE c.instrument_id = b.instrument_id AND c.status = 'active' AND c.kind <> 'service' AND c.id <> b.id
             AND c.during && b.during AND c.created_at >= b.cancelled_at), 0) ELSE 0 END,
       CASE WHEN EXISTS (SELECT 1 FROM booking_funding f WHERE f.booking_id = b.id) THEN
           (SELECT json_agg(json_build_object('account_id', f.account_id, 'basis_points', f.basis_points) ORDER BY f.position)
            FROM booking_funding f WHERE f.booking_id = b.id) END,
       u.started_at, u.ended_at
FROM bookings b
LEFT JOIN no_shows n ON n.booking_id = b.id
LEFT JOIN usages u ON u.booking_id = b.id
WHERE b.project_id = $1 AND b.kind <> 'service' AND lower(b.during) >= $2 AND lower(b.during) < $3
ORDER BY lower(b.during), b.id, u.started_at`
	rows, err := q.Query(ctx, sql, projectID, from, to)
	if err != nil {
		return nil, err
	}
	var out []scheduling.BillableBooking
	var bb scheduling.BillableBooking
	var kind, status string
	var rebooked int64
	var funding []byte
	var started, ended *time.Time
	b := &bb.Booking
	_, err = pgx.ForEachRow(rows, []any{&b.ID, &b.InstrumentID, &b.UserID, &kind, &b.Start, &b.End, &status, &b.CancelledAt,
		&bb.DisplacedByService, &bb.NoShow, &rebooked, &funding, &started, &ended}, func() error {
		if n := len(out); n == 0 || out[n-1].Booking.ID != b.ID {
			b.ProjectID, b.Kind, b.Status, bb.RebookedMinutes = projectID, scheduling.BookingKind(kind), scheduling.BookingStatus(status), int(rebooked)
			b.Start, b.End = b.Start.UTC(), b.End.UTC()
			bb.Usages, bb.Funding = nil, nil
			if funding != nil {
				if err := json.Unmarshal(funding, &bb.Funding); err != nil {
					return err
				}
			}
			out = append(out, bb)
		}
		if started != nil {
			last := &out[len(out)-1]
			last.Usages = append(last.Usages, scheduling.Usage{BookingID: b.ID, StartedAt: *started, EndedAt: ended})
		}
		return nil
	})
	return out, err
}

// adjustmentsIn reads a project's adjustments made in [from, to).
func adjustmentsIn(ctx context.Context, q querier, projectID string, from, to time.Time) ([]scheduling.Adjustment, error) {
	const sql = `
SELECT id::text, at, amount_minor, reason, made_by::text, funding, coalesce(corrects_statement_id::text, '')
FROM adjustments WHERE project_id = $1 AND at >= $2 AND at < $3 ORDER BY at, id`
	rows, err := q.Query(ctx, sql, projectID, from, to)
	if err != nil {
		return nil, err
	}
	var out []scheduling.Adjustment
	var a scheduling.Adjustment
	var funding []byte
	_, err = pgx.ForEachRow(rows, []any{&a.ID, &a.At, &a.AmountMinor, &a.Reason, &a.By, &funding, &a.CorrectsStatementID}, func() error {
		a.Funding = nil
		a.At = a.At.UTC()
		if err := json.Unmarshal(funding, &a.Funding); err != nil {
			return err
		}
		out = append(out, a)
		return nil
	})
	return out, err
}

// statementSources gathers what a project's statement for [from, to) is priced from.
func statementSources(ctx context.Context, tx pgx.Tx, projectID, statementID string, from, to, now time.Time) (scheduling.StatementSources, error) {
	src := scheduling.StatementSources{StatementID: statementID, ProjectID: projectID, PeriodStart: from, PeriodEnd: to, Now: now}
	var rc string
	err := tx.QueryRow(ctx, `SELECT p.rate_class, f.currency FROM projects p CROSS JOIN facility f WHERE p.id = $1 AND f.id = 1`, projectID).Scan(&rc, &src.Currency)
	if err != nil {
		return src, err
	}
	src.RateClass = accounts.RateClass(rc)
	if src.Facility, err = facilityBillingPolicy(ctx, tx); err != nil {
		return src, err
	}
	if src.Overrides, err = billingOverrides(ctx, tx); err != nil {
		return src, err
	}
	if src.Schedules, err = rateSchedules(ctx, tx, ""); err != nil {
		return src, err
	}
	if src.ProjectFunding, err = fundingSplit(ctx, tx, "project_funding", "project_id", projectID); err != nil {
		return src, err
	}
	if src.Bookings, err = billableBookings(ctx, tx, projectID, from, to); err != nil {
		return src, err
	}
	src.Adjustments, err = adjustmentsIn(ctx, tx, projectID, from, to)
	return src, err
}

// ComputeStatement prices a project's bookings and adjustments of the period holding
// at (bounds given by the caller in the facility's zone) and stores the result as
// the period's draft, replacing an earlier draft of it; created reports a new one. The
// statement and its ledger event commit together. ErrConflict when the period's
// statement was issued; pricing errors (no rate schedule in force, no funding split)
// as scheduling reports them.
func (db *DB) ComputeStatement(ctx context.Context, projectID string, from, to time.Time, actor string, now time.Time) (st scheduling.Statement, created bool, err error) {
	if !accounts.ValidID(projectID) {
		return st, false, beamledger.NotFound("project")
	}
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var id, status string
		err := tx.QueryRow(ctx, `SELECT id::text, status FROM statements WHERE project_id = $1 AND period_start = $2 FOR UPDATE`, projectID, from).Scan(&id, &status)
		switch {
		case errors.Is(err, pgx.ErrNoRows):
			id, created = uuid.NewString(), true
		case err != nil:
			return err
		case status == string(scheduling.StatementIssued):
			return beamledger.Conflict("the statement of this period was issued and cannot change; record corrections as adjustments in a later period")
		}
		src, err := statementSources(ctx, tx, projectID, id, from, to, now)
		if err != nil {
			return err
		}
		in, err := scheduling.PriceStatement(src)
		if err != nil {
			return err
		}
		if st, err = scheduling.AssembleStatement(in); err != nil {
			return err
		}
		if err := writeStatement(ctx, tx, st.Record(), created, now); err != nil {
			return err
		}
		action := provenance.ActionCreate
		if !created {
			action = provenance.ActionCorrect
		}
		return appendChange(ctx, tx, actor, action, provenance.EntityStatement, id, now, st.Record())
	})
	return st, created, mapError(err, "statement")
}

// writeStatement stores a draft's row and lines, replacing the lines of an earlier
// draft of the same statement.
func writeStatement(ctx context.Context, tx pgx.Tx, rec scheduling.StatementRecord, created bool, now time.Time) error {
	components, err := json.Marshal(rec.ComponentTotals)
	if err != nil {
		return err
	}
	accountTotals, err := json.Marshal(rec.AccountTotals)
	if err != nil {
		return err
	}
	if created {
		const q = `
INSERT INTO statements (id, project_id, period_start, period_end, currency, status, computed_at, total_minor, component_totals, account_totals)
VALUES ($1, $2, $3, $4, $5, 'draft', $6, $7, $8, $9)`
		_, err = tx.Exec(ctx, q, rec.ID, rec.ProjectID, rec.PeriodStart, rec.PeriodEnd, rec.Currency, now, rec.TotalMinor, components, accountTotals)
	} else {
		if _, err = tx.Exec(ctx, `DELETE FROM statement_lines WHERE statement_id = $1`, rec.ID); err != nil {
			return err
		}
		const q = `UPDATE statements SET computed_at = $2, currency = $3, total_minor = $4, component_totals = $5, account_totals = $6 WHERE id = $1`
		_, err = tx.Exec(ctx, q, rec.ID, now, rec.Currency, rec.TotalMinor, components, accountTotals)
	}
	if err != nil {
		return err
	}
	rows := make([][]any, len(rec.Lines))
	for i, l := range rec.Lines {
		allocs, err := json.Marshal(l.Allocations)
		if err != nil {
			return err
		}
		rows[i] = []any{rec.ID, l.LineNo, nullID(l.BookingID), nullID(l.InstrumentID), nullText(string(l.BookingKind)), l.BookingStart,
			string(l.Component), string(l.Rule), l.From, l.To, l.Minutes, l.HourlyRateMinor, l.AmountMinor, l.Reason,
			nullID(l.AdjustmentID), nullID(l.CorrectsStatementID), string(allocs)}
	}
	_, err = tx.CopyFrom(ctx, pgx.Identifier{"statement_lines"}, []string{"statement_id", "line_no", "booking_id", "instrument_id",
		"booking_kind", "booking_start", "component", "rule", "from_at", "to_at", "minutes", "hourly_rate_minor", "amount_minor",
		"reason", "adjustment_id", "corrects_statement_id", "allocations"}, pgx.CopyFromRows(rows))
	return err
}

func nullID(s string) any {
	if s == "" {
		return nil
	}
	return s
}

func nullText(s string) any { return nullID(s) }

// Statement reads a statement with its lines. ErrNotFound when there is none.
func (db *DB) Statement(ctx context.Context, id string) (scheduling.Statement, error) {
	if !accounts.ValidID(id) {
		return scheduling.Statement{}, beamledger.NotFound("statement")
	}
	st, err := readStatement(ctx, db.pool, id)
	return st, mapError(err, "statement")
}

func readStatement(ctx context.Context, q querier, id string) (scheduling.Statement, error) {
	var rec scheduling.StatementRecord
	var status string
	var components, accountTotals []byte
	const head = `
SELECT id::text, project_id::text, currency, period_start, period_end, status, issued_at, total_minor, component_totals, account_totals
FROM statements WHERE id = $1`
	if err := q.QueryRow(ctx, head, id).Scan(&rec.ID, &rec.ProjectID, &rec.Currency, &rec.PeriodStart, &rec.PeriodEnd, &status,
		&rec.IssuedAt, &rec.TotalMinor, &components, &accountTotals); err != nil {
		return scheduling.Statement{}, err
	}
	rec.Status, rec.PeriodStart, rec.PeriodEnd = scheduling.StatementStatus(status), rec.PeriodStart.UTC(), rec.PeriodEnd.UTC()
	if rec.IssuedAt != nil {
		t := rec.IssuedAt.UTC()
		rec.IssuedAt = &t
	}
	if err := json.Unmarshal(components, &rec.ComponentTotals); err != nil {
		return scheduling.Statement{}, err
	}
	if err := json.Unmarshal(accountTotals, &rec.AccountTotals); err != nil {
		return scheduling.Statement{}, err
	}
	const lines = `
SELECT line_no, coalesce(booking_id::text, ''), coalesce(instrument_id::text, ''), coalesce(booking_kind, ''), booking_start,
       component, rule, from_at, to_at, minutes, hourly_rate_minor, amount_minor, reason, coalesce(adjustment_id::text, ''),
       coalesce(corrects_statement_id::text, ''), allocations
FROM statement_lines WHERE statement_id = $1 ORDER BY line_no`
	rows, err := q.Query(ctx, lines, id)
	if err != nil {
		return scheduling.Statement{}, err
	}
	var l scheduling.StatementLine
	var kind, component, rule string
	var allocs []byte
	_, err = pgx.ForEachRow(rows, []any{&l.LineNo, &l.BookingID, &l.InstrumentID, &kind, &l.BookingStart, &component, &rule,
		&l.From, &l.To, &l.Minutes, &l.HourlyRateMinor, &l.AmountMinor, &l.Reason, &l.AdjustmentID, &l.CorrectsStatementID, &allocs}, func() error {
		l.BookingKind, l.Component, l.Rule = scheduling.BookingKind(kind), scheduling.ChargeComponent(component), scheduling.ChargeRule(rule)
		for _, t := range []**time.Time{&l.BookingStart, &l.From, &l.To} {
			if *t != nil {
				u := (*t).UTC()
				*t = &u
			}
		}
		l.Allocations = nil
		if err := json.Unmarshal(allocs, &l.Allocations); err != nil {
			return err
		}
		rec.Lines = append(rec.Lines, l)
		return nil
	})
	if err != nil {
		return scheduling.Statement{}, err
	}
	st, err := scheduling.RestoreStatement(rec)
	if err != nil {
		return st, fmt.Errorf("stored statement %s: %w", id, err)
	}
	return st, nil
}

// Statements lists a project's statements, latest period first.
func (db *DB) Statements(ctx context.Context, projectID string) ([]StatementSummary, error) {
	if !accounts.ValidID(projectID) {
		return nil, beamledger.NotFound("project")
	}
	const q = `
SELECT id::text, project_id::text, period_start, period_end, currency, status, computed_at, issued_at, total_minor
FROM statements WHERE project_id = $1 ORDER BY period_start DESC`
	rows, err := db.pool.Query(ctx, q, projectID)
	if err != nil {
		return nil, mapError(err, "statement")
	}
	out, err := pgx.CollectRows(rows, pgx.RowToStructByPos[StatementSummary])
	if out == nil {
		out = []StatementSummary{}
	}
	return out, mapError(err, "statement")
}

// IssueStatement makes a draft final, with its ledger event holding every line.
// ErrConflict when it was issued already.
func (db *DB) IssueStatement(ctx context.Context, id, actor string, now time.Time) (scheduling.Statement, error) {
	if !accounts.ValidID(id) {
		return scheduling.Statement{}, beamledger.NotFound("statement")
	}
	var out scheduling.Statement
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `SELECT 1 FROM statements WHERE id = $1 FOR UPDATE`, id); err != nil {
			return err
		}
		st, err := readStatement(ctx, tx, id)
		if err != nil {
			return err
		}
		if out, err = st.Issue(now.UTC().Truncate(time.Microsecond)); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, `UPDATE statements SET status = 'issued', issued_at = $2, issued_by = $3 WHERE id = $1`, id, now, actor); err != nil {
			return err
		}
		return appendChange(ctx, tx, actor, provenance.ActionIssue, provenance.EntityStatement, id, now, out.Record())
	})
	return out, mapError(err, "statement")
}

// AddAdjustment stores a manager's credit or debit (validated by the caller) with its
// ledger event. ErrConflict when the statement of the period holding its instant
// (bounds given) was issued already: the adjustment would reach no statement.
func (db *DB) AddAdjustment(ctx context.Context, projectID string, a scheduling.Adjustment, periodStart time.Time) (scheduling.Adjustment, error) {
	if !accounts.ValidID(projectID) {
		return a, beamledger.NotFound("project")
	}
	if a.CorrectsStatementID != "" && !accounts.ValidID(a.CorrectsStatementID) {
		return a, beamledger.InvalidField("corrects_statement_id", "names no statement")
	}
	a.ID, a.At = uuid.NewString(), a.At.UTC().Truncate(time.Microsecond)
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var issued bool
		err := tx.QueryRow(ctx, `SELECT status = 'issued' FROM statements WHERE project_id = $1 AND period_start = $2 FOR SHARE`, projectID, periodStart).Scan(&issued)
		if err != nil && !errors.Is(err, pgx.ErrNoRows) {
			return err
		}
		if issued {
			return beamledger.Conflict("this period's statement was issued already; the adjustment belongs in the next period")
		}
		if a.CorrectsStatementID != "" {
			var ok bool
			if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM statements WHERE id = $1 AND project_id = $2 AND status = 'issued')`,
				a.CorrectsStatementID, projectID).Scan(&ok); err != nil {
				return err
			}
			if !ok {
				return beamledger.InvalidField("corrects_statement_id", "must name an issued statement of the project")
			}
		}
		funding, err := json.Marshal(a.Funding)
		if err != nil {
			return err
		}
		const q = `
INSERT INTO adjustments (id, project_id, at, amount_minor, reason, made_by, funding, corrects_statement_id)
VALUES ($1, $2, $3, $4, $5, $6, $7, nullif($8, '')::uuid)`
		if _, err := tx.Exec(ctx, q, a.ID, projectID, a.At, a.AmountMinor, a.Reason, a.By, funding, a.CorrectsStatementID); err != nil {
			return err
		}
		return appendChange(ctx, tx, a.By, provenance.ActionCreate, provenance.EntityAdjustment, a.ID, a.At, a)
	})
	return a, mapError(err, "adjustment")
}

// ComputeStatements computes the drafts of many projects for [from, to), as
// ComputeStatement does for one, several at a time (as many as the pool has
// connections), each in its own transaction. It returns the drafts in the order of
// projectIDs; a project whose statement for the period was issued is left as issued
// and has no draft (a zero Statement). It stops at the first other error.
func (db *DB) ComputeStatements(ctx context.Context, projectIDs []string, from, to time.Time, actor string, now time.Time) ([]scheduling.Statement, error) {
	out := make([]scheduling.Statement, len(projectIDs))
	ctx, cancel := context.WithCancelCause(ctx)
	defer cancel(nil)
	slots := make(chan struct{}, max(int(db.pool.Config().MaxConns), 1))
	var wg sync.WaitGroup
	for i, id := range projectIDs {
		select {
		case slots <- struct{}{}:
		case <-ctx.Done():
		}
		if ctx.Err() != nil {
			break
		}
		wg.Add(1)
		go func() {
			defer func() { <-slots; wg.Done() }()
			st, _, err := db.ComputeStatement(ctx, id, from, to, actor, now)
			if err != nil && !errors.Is(err, beamledger.ErrConflict) {
				cancel(err)
				return
			}
			out[i] = st
		}()
	}
	wg.Wait()
	if err := context.Cause(ctx); err != nil && !errors.Is(err, context.Canceled) {
		return nil, err
	}
	return out, ctx.Err()
}
