package postgres

import (
	"context"
	"encoding/json"
	"errors"
	"runtime"
	"sync"
	"sync/atomic"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// Computing drafts reads the sources of every project asked for in a few set-based
// queries, prices each project in Go with the scheduling package's pure functions,
// and writes every draft, its lines and its ledger event in the same transaction with
// COPY and multi-row statements: the round trips do not grow with the projects or
// bookings, so a month's statements for the whole facility cost about what one does.

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
		drafts, err := computeDrafts(ctx, tx, []string{projectID}, from, to, actor, now)
		if err != nil {
			return err
		}
		d := drafts[0]
		if d.issued {
			return beamledger.Conflict("the statement of this period was issued and cannot change; record corrections as adjustments in a later period")
		}
		st, created = d.st, d.created
		return nil
	})
	return st, created, mapError(err, "statement")
}

// ComputeStatements computes the drafts of many projects for [from, to), as
// ComputeStatement does for one, in a single transaction: either every draft with its
// lines and ledger event is stored, or none is. It returns the drafts in the order of
// projectIDs (a project named twice gets the same draft twice); a project whose
// statement for the period was issued is left as issued and has no draft (a zero
// Statement). Any other error, for any project, stores nothing.
func (db *DB) ComputeStatements(ctx context.Context, projectIDs []string, from, to time.Time, actor string, now time.Time) ([]scheduling.Statement, error) {
	for _, id := range projectIDs {
		if !accounts.ValidID(id) {
			return nil, beamledger.NotFound("project")
		}
	}
	unique := make([]string, 0, len(projectIDs))
	seen := make(map[string]bool, len(projectIDs))
	for _, id := range projectIDs {
		if !seen[id] {
			seen[id] = true
			unique = append(unique, id)
		}
	}
	out := make([]scheduling.Statement, len(projectIDs))
	if len(unique) == 0 {
		return out, nil
	}
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		drafts, err := computeDrafts(ctx, tx, unique, from, to, actor, now)
		if err != nil {
			return err
		}
		byProject := make(map[string]scheduling.Statement, len(drafts))
		for i, d := range drafts {
			if !d.issued {
				byProject[unique[i]] = d.st
			}
		}
		for i, id := range projectIDs {
			out[i] = byProject[id]
		}
		return nil
	})
	if err != nil {
		return nil, mapError(err, "statement")
	}
	return out, nil
}

// draft is one project's outcome of computeDrafts.
type draft struct {
	st      scheduling.Statement
	created bool // a new statement, not a recomputed draft
	issued  bool // the period's statement was issued: left alone, st is zero
}

// computeDrafts prices and stores, in tx, the drafts of distinct projects for
// [from, to), each replacing the period's earlier draft, with one ledger event per
// statement (create for a new one, correct for a recomputed one). Projects whose
// statement was issued are reported, not touched. pgx.ErrNoRows when a project or the
// facility does not exist.
func computeDrafts(ctx context.Context, tx pgx.Tx, projectIDs []string, from, to time.Time, actor string, now time.Time) ([]draft, error) {
	// The reads below are many rows but simple plans: compiling them (JIT) would cost
	// more than running them.
	if _, err := tx.Exec(ctx, `SET LOCAL jit = off`); err != nil {
		return nil, err
	}
	// Computations of one period take turns, whichever process runs them: two that
	// both found no draft would otherwise both insert one, and the second would fail
	// on the period's unique statement. One key per period cannot deadlock.
	if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock(hashtextextended('beamledger statements ' || $1::text, 0))`, from.UTC()); err != nil {
		return nil, err
	}
	// Lock the period's existing statements (in id order, so that concurrent batches
	// cannot deadlock) before reading what they are priced from.
	type existing struct {
		id     string
		issued bool
	}
	found := map[string]existing{}
	rows, err := tx.Query(ctx, `
SELECT project_id::text, id::text, status = 'issued' FROM statements
WHERE project_id = ANY($1::uuid[]) AND period_start = $2 ORDER BY id FOR UPDATE`, projectIDs, from)
	if err != nil {
		return nil, err
	}
	var pid string
	var e existing
	if _, err := pgx.ForEachRow(rows, []any{&pid, &e.id, &e.issued}, func() error { found[pid] = e; return nil }); err != nil {
		return nil, err
	}

	drafts := make([]draft, len(projectIDs))
	var pending []string
	for i, id := range projectIDs {
		if x, ok := found[id]; ok && x.issued {
			drafts[i].issued = true
			continue
		}
		pending = append(pending, id)
	}
	srcs, err := statementSourcesAll(ctx, tx, pending, from, to, now)
	if err != nil {
		return nil, err
	}

	// Pricing is pure and per project: spread it over the processors.
	var todo []int   // indexes into projectIDs
	var ids []string // the statement of each
	for i, id := range projectIDs {
		if drafts[i].issued {
			continue
		}
		x, ok := found[id]
		if !ok {
			x.id, drafts[i].created = uuid.NewString(), true
		}
		todo, ids = append(todo, i), append(ids, x.id)
	}
	records := make([]scheduling.StatementRecord, len(todo))
	created := make([]bool, len(todo))
	err = parallel(len(todo), func(k int) error {
		i := todo[k]
		src := srcs[projectIDs[i]]
		src.StatementID = ids[k]
		in, err := scheduling.PriceStatement(src)
		if err != nil {
			return err
		}
		if drafts[i].st, err = scheduling.AssembleStatement(in); err != nil {
			return err
		}
		records[k], created[k] = drafts[i].st.Record(), drafts[i].created
		return nil
	})
	if err != nil {
		return nil, err
	}
	if err := writeStatements(ctx, tx, records, created, actor, now); err != nil {
		return nil, err
	}
	return drafts, nil
}

// statementSourcesAll gathers what each project's statement for [from, to) is priced
// from, keyed by project, in a fixed number of queries. StatementID is left for the
// caller. pgx.ErrNoRows when a project or the facility does not exist.
func statementSourcesAll(ctx context.Context, tx pgx.Tx, projectIDs []string, from, to, now time.Time) (map[string]scheduling.StatementSources, error) {
	out := make(map[string]scheduling.StatementSources, len(projectIDs))
	if len(projectIDs) == 0 {
		return out, nil
	}
	var currency string
	if err := tx.QueryRow(ctx, `SELECT currency FROM facility WHERE id = 1`).Scan(&currency); err != nil {
		return nil, err
	}
	policy, err := facilityBillingPolicy(ctx, tx)
	if err != nil {
		return nil, err
	}
	overrides, err := billingOverrides(ctx, tx)
	if err != nil {
		return nil, err
	}
	schedules, err := rateSchedules(ctx, tx, "")
	if err != nil {
		return nil, err
	}
	rows, err := tx.Query(ctx, `SELECT id::text, rate_class FROM projects WHERE id = ANY($1::uuid[])`, projectIDs)
	if err != nil {
		return nil, err
	}
	var id, rc string
	if _, err := pgx.ForEachRow(rows, []any{&id, &rc}, func() error {
		out[id] = scheduling.StatementSources{ProjectID: id, RateClass: accounts.RateClass(rc), Currency: currency,
			PeriodStart: from, PeriodEnd: to, Now: now, Schedules: schedules, Facility: policy, Overrides: overrides,
			ProjectFunding: []scheduling.FundingShare{}}
		return nil
	}); err != nil {
		return nil, err
	}
	if len(out) != len(projectIDs) {
		return nil, pgx.ErrNoRows
	}
	funding, err := projectFundingAll(ctx, tx, projectIDs)
	if err != nil {
		return nil, err
	}
	bookings, err := billableBookingsAll(ctx, tx, projectIDs, from, to)
	if err != nil {
		return nil, err
	}
	adjustments, err := adjustmentsAll(ctx, tx, projectIDs, from, to)
	if err != nil {
		return nil, err
	}
	classes, err := accountRateClasses(ctx, tx, projectIDs)
	if err != nil {
		return nil, err
	}
	for id, src := range out {
		src.AccountClasses = classes
		if f, ok := funding[id]; ok {
			src.ProjectFunding = f
		}
		src.Bookings, src.Adjustments = bookings[id], adjustments[id]
		out[id] = src
	}
	return out, nil
}

// projectFundingAll reads the default splits of the projects, keyed by project.
func projectFundingAll(ctx context.Context, q querier, projectIDs []string) (map[string][]scheduling.FundingShare, error) {
	rows, err := q.Query(ctx, `
SELECT project_id::text, account_id::text, basis_points FROM project_funding
WHERE project_id = ANY($1::uuid[]) ORDER BY project_id, position`, projectIDs)
	if err != nil {
		return nil, err
	}
	out := map[string][]scheduling.FundingShare{}
	var pid string
	var s scheduling.FundingShare
	_, err = pgx.ForEachRow(rows, []any{&pid, &s.AccountID, &s.BasisPoints}, func() error {
		out[pid] = append(out[pid], s)
		return nil
	})
	return out, err
}

// billableBookingsAll reads the projects' bookings starting in [from, to), keyed by
// project, each with its usage, no-show mark, displacement, the minutes of a cancelled
// booking others booked after its cancellation (active bookings of one instrument
// never overlap, so the sum is their union), and the booking's own split.
func billableBookingsAll(ctx context.Context, q querier, projectIDs []string, from, to time.Time) (map[string][]scheduling.BillableBooking, error) {
	// One row per booking and usage (NULL usage for a booking without), grouped by
	// project and in booking order within it: a flat join the planner can hash, with
	// binary timestamps.
	const sql = `
SELECT b.project_id::text, b.id::text, b.instrument_id::text, b.user_id::text, b.kind, lower(b.during), upper(b.during), b.status, b.cancelled_at,
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
WHERE b.project_id = ANY($1::uuid[]) AND b.kind <> 'service' AND lower(b.during) >= $2 AND lower(b.during) < $3
ORDER BY b.project_id, lower(b.during), b.id, u.started_at`
	rows, err := q.Query(ctx, sql, projectIDs, from, to)
	if err != nil {
		return nil, err
	}
	out := map[string][]scheduling.BillableBooking{}
	var cur []scheduling.BillableBooking // the bookings of project curID, in order
	curID := ""
	var bb scheduling.BillableBooking
	var projectID, kind, status string
	var rebooked int64
	var funding []byte
	var started, ended *time.Time
	b := &bb.Booking
	_, err = pgx.ForEachRow(rows, []any{&projectID, &b.ID, &b.InstrumentID, &b.UserID, &kind, &b.Start, &b.End, &status, &b.CancelledAt,
		&bb.DisplacedByService, &bb.NoShow, &rebooked, &funding, &started, &ended}, func() error {
		if projectID != curID {
			if curID != "" {
				out[curID] = cur
			}
			cur, curID = nil, projectID
		}
		if n := len(cur); n == 0 || cur[n-1].Booking.ID != b.ID {
			b.ProjectID, b.Kind, b.Status, bb.RebookedMinutes = projectID, scheduling.BookingKind(kind), scheduling.BookingStatus(status), int(rebooked)
			b.Start, b.End = b.Start.UTC(), b.End.UTC()
			bb.Usages, bb.Funding = nil, nil
			if funding != nil {
				if err := json.Unmarshal(funding, &bb.Funding); err != nil {
					return err
				}
			}
			cur = append(cur, bb)
		}
		if started != nil {
			last := &cur[len(cur)-1]
			last.Usages = append(last.Usages, scheduling.Usage{BookingID: b.ID, StartedAt: *started, EndedAt: ended})
		}
		return nil
	})
	if curID != "" {
		out[curID] = cur
	}
	return out, err
}

// adjustmentsAll reads the projects' adjustments made in [from, to), keyed by project.
func adjustmentsAll(ctx context.Context, q querier, projectIDs []string, from, to time.Time) (map[string][]scheduling.Adjustment, error) {
	const sql = `
SELECT project_id::text, id::text, at, amount_minor, reason, made_by::text, funding, coalesce(corrects_statement_id::text, '')
FROM adjustments WHERE project_id = ANY($1::uuid[]) AND at >= $2 AND at < $3 ORDER BY project_id, at, id`
	rows, err := q.Query(ctx, sql, projectIDs, from, to)
	if err != nil {
		return nil, err
	}
	out := map[string][]scheduling.Adjustment{}
	var pid string
	var a scheduling.Adjustment
	var funding []byte
	_, err = pgx.ForEachRow(rows, []any{&pid, &a.ID, &a.At, &a.AmountMinor, &a.Reason, &a.By, &funding, &a.CorrectsStatementID}, func() error {
		a.Funding = nil
		a.At = a.At.UTC()
		if err := json.Unmarshal(funding, &a.Funding); err != nil {
			return err
		}
		out[pid] = append(out[pid], a)
		return nil
	})
	return out, err
}

// writeStatements stores drafts in tx: new ones (created) are inserted, earlier
// drafts have their row updated and their lines replaced; then every line goes in
// with one COPY and every statement gets its ledger event, the same event
// ComputeStatement has always written (create for a new statement, correct for a
// recomputed one, holding the statement's record).
func writeStatements(ctx context.Context, tx pgx.Tx, recs []scheduling.StatementRecord, created []bool, actor string, now time.Time) error {
	if len(recs) == 0 {
		return nil
	}
	// Encoding the lines and the events (canonical JSON) is per statement: spread it
	// over the processors too.
	type encoded struct {
		components, accountTotals string
		lines                     [][]any
		event                     provenance.LedgerEvent
	}
	enc := make([]encoded, len(recs))
	err := parallel(len(recs), func(i int) error {
		rec := recs[i]
		components, err := json.Marshal(rec.ComponentTotals)
		if err != nil {
			return err
		}
		accountTotals, err := json.Marshal(rec.AccountTotals)
		if err != nil {
			return err
		}
		e := encoded{components: string(components), accountTotals: string(accountTotals), lines: make([][]any, len(rec.Lines))}
		for k, l := range rec.Lines {
			allocs, err := json.Marshal(l.Allocations)
			if err != nil {
				return err
			}
			e.lines[k] = []any{rec.ID, l.LineNo, nullID(l.BookingID), nullID(l.InstrumentID), nullText(string(l.BookingKind)), l.BookingStart,
				string(l.Component), string(l.Rule), l.From, l.To, l.Minutes, l.HourlyRateMinor, l.AmountMinor, l.Reason,
				nullID(l.AdjustmentID), nullID(l.CorrectsStatementID), string(allocs)}
		}
		action := provenance.ActionCreate
		if !created[i] {
			action = provenance.ActionCorrect
		}
		if e.event, err = provenance.NewLedgerEvent(actor, action, provenance.EntityStatement, rec.ID, now, rec); err != nil {
			return err
		}
		enc[i] = e
		return nil
	})
	if err != nil {
		return err
	}
	var inserts, lines [][]any
	var upd struct {
		ids, currencies, components, accountTotals []string
		totals                                     []int64
	}
	events := make([]provenance.LedgerEvent, len(recs))
	for i, rec := range recs {
		e := enc[i]
		if created[i] {
			inserts = append(inserts, []any{rec.ID, rec.ProjectID, rec.PeriodStart, rec.PeriodEnd, rec.Currency, "draft", now,
				rec.TotalMinor, e.components, e.accountTotals})
		} else {
			upd.ids, upd.currencies, upd.totals = append(upd.ids, rec.ID), append(upd.currencies, rec.Currency), append(upd.totals, rec.TotalMinor)
			upd.components, upd.accountTotals = append(upd.components, e.components), append(upd.accountTotals, e.accountTotals)
		}
		lines = append(lines, e.lines...)
		events[i] = e.event
	}
	if len(inserts) > 0 {
		if _, err := tx.CopyFrom(ctx, pgx.Identifier{"statements"}, []string{"id", "project_id", "period_start", "period_end",
			"currency", "status", "computed_at", "total_minor", "component_totals", "account_totals"}, pgx.CopyFromRows(inserts)); err != nil {
			return err
		}
	}
	if len(upd.ids) > 0 {
		if _, err := tx.Exec(ctx, `DELETE FROM statement_lines WHERE statement_id = ANY($1::uuid[])`, upd.ids); err != nil {
			return err
		}
		const q = `
UPDATE statements s SET computed_at = $6, currency = v.currency, total_minor = v.total,
       component_totals = v.components::jsonb, account_totals = v.account_totals::jsonb
FROM unnest($1::uuid[], $2::text[], $3::bigint[], $4::text[], $5::text[]) AS v(id, currency, total, components, account_totals)
WHERE s.id = v.id`
		tag, err := tx.Exec(ctx, q, upd.ids, upd.currencies, upd.totals, upd.components, upd.accountTotals, now)
		if err != nil {
			return err
		}
		if tag.RowsAffected() != int64(len(upd.ids)) {
			return errors.New("statements: a draft being recomputed vanished")
		}
	}
	if len(lines) > 0 {
		if _, err := tx.CopyFrom(ctx, pgx.Identifier{"statement_lines"}, []string{"statement_id", "line_no", "booking_id", "instrument_id",
			"booking_kind", "booking_start", "component", "rule", "from_at", "to_at", "minutes", "hourly_rate_minor", "amount_minor",
			"reason", "adjustment_id", "corrects_statement_id", "allocations"}, pgx.CopyFromRows(lines)); err != nil {
			return err
		}
	}
	if len(events) == 1 {
		return appendEvent(ctx, tx, events[0])
	}
	_, err = tx.CopyFrom(ctx, pgx.Identifier{"ledger_events"}, []string{"actor", "at", "action", "entity_type", "entity_id", "leaf"},
		pgx.CopyFromSlice(len(events), func(i int) ([]any, error) {
			ev := events[i]
			return []any{ev.Actor, ev.At, ev.Action, ev.EntityType, ev.EntityID, ev.Leaf}, nil
		}))
	return err
}

// parallel runs f(0) … f(n-1) on as many goroutines as there are processors and
// returns the error of the lowest index that failed, so that the error reported does
// not depend on scheduling.
func parallel(n int, f func(i int) error) error {
	errs := make([]error, n)
	var next atomic.Int64
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), n) {
		wg.Go(func() {
			for i := int(next.Add(1)) - 1; i < n; i = int(next.Add(1)) - 1 {
				errs[i] = f(i)
			}
		})
	}
	wg.Wait()
	return firstError(errs)
}

func firstError(errs []error) error {
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}
