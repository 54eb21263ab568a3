package postgres

import (
	"context"
	"encoding/json"
	"fmt"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// AddCostEntry stores a cost entry (validated by the caller) with its ledger event.
func (db *DB) AddCostEntry(ctx context.Context, e scheduling.CostEntry) (scheduling.CostEntry, error) {
	if !accounts.ValidID(e.InstrumentID) {
		return e, beamledger.NotFound("instrument")
	}
	e.ID, e.EnteredAt = uuid.NewString(), e.EnteredAt.UTC().Truncate(time.Microsecond)
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireInstrument(ctx, tx, e.InstrumentID); err != nil {
			return err
		}
		const q = `
INSERT INTO cost_entries (id, instrument_id, fiscal_year, category, amount_minor, note, entered_by, entered_at)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8)`
		if _, err := tx.Exec(ctx, q, e.ID, e.InstrumentID, e.FiscalYear, e.Category, e.AmountMinor, e.Note, e.EnteredBy, e.EnteredAt); err != nil {
			return err
		}
		return appendChange(ctx, tx, e.EnteredBy, provenance.ActionCreate, provenance.EntityCostEntry, e.ID, e.EnteredAt, e)
	})
	return e, mapError(err, "cost entry")
}

// CostEntries lists a fiscal year's cost entries by instrument and entry time.
func (db *DB) CostEntries(ctx context.Context, fiscalYear int) ([]scheduling.CostEntry, error) {
	const q = `
SELECT id::text, instrument_id::text, fiscal_year, category, amount_minor, note, entered_by::text, entered_at
FROM cost_entries WHERE fiscal_year = $1 ORDER BY instrument_id, entered_at, id`
	rows, err := db.pool.Query(ctx, q, fiscalYear)
	if err != nil {
		return nil, mapError(err, "cost entry")
	}
	out, err := pgx.CollectRows(rows, pgx.RowToStructByPos[scheduling.CostEntry])
	if out == nil {
		out = []scheduling.CostEntry{}
	}
	return out, mapError(err, "cost entry")
}

// IssuedChargesByInstrument sums, per instrument, the lines of issued statements whose
// period starts in [from, to) (each statement keeps its per-instrument sums beside
// its lines). Monthly-cap and adjustment lines name no instrument and are not counted:
// they are not any one instrument's recovery.
func (db *DB) IssuedChargesByInstrument(ctx context.Context, from, to time.Time) (map[string]int64, error) {
	const q = `
SELECT t.key, sum(t.value::bigint)::bigint
FROM statements s CROSS JOIN LATERAL jsonb_each_text(s.instrument_totals) t
WHERE s.status = 'issued' AND s.period_start >= $1 AND s.period_start < $2
GROUP BY t.key`
	rows, err := db.pool.Query(ctx, q, from, to)
	if err != nil {
		return nil, mapError(err, "statement")
	}
	out := map[string]int64{}
	var id string
	var sum int64
	_, err = pgx.ForEachRow(rows, []any{&id, &sum}, func() error { out[id] = sum; return nil })
	return out, mapError(err, "statement")
}

// UtilizationInputs reads what an instrument's utilization report over [from, to)
// needs: its bookings overlapping the range with their usage and marks, its rules and
// billing policy in force, and the quotas on it.
type UtilizationInputs struct {
	Rules    scheduling.Rules
	Policy   scheduling.BillingPolicy
	Bookings []scheduling.UtilizationBooking
	Quotas   []scheduling.Quota
}

// UtilizationInputs implements the read behind the utilization report. ErrNotFound
// for an unknown instrument.
func (db *DB) UtilizationInputs(ctx context.Context, instrumentID string, from, to time.Time) (UtilizationInputs, error) {
	if !accounts.ValidID(instrumentID) {
		return UtilizationInputs{}, beamledger.NotFound("instrument")
	}
	all, err := db.utilizationInputs(ctx, instrumentID, from, to)
	if err != nil {
		return UtilizationInputs{}, err
	}
	in, ok := all[instrumentID]
	if !ok {
		return UtilizationInputs{}, beamledger.NotFound("instrument")
	}
	return *in, nil
}

// UtilizationInputsAll reads what every instrument's utilization report over
// [from, to) needs, in one pass over the bookings: the facility's whole report.
func (db *DB) UtilizationInputsAll(ctx context.Context, from, to time.Time) (map[string]*UtilizationInputs, error) {
	return db.utilizationInputs(ctx, "", from, to)
}

// utilizationInputs reads the inputs of one instrument's report, or of every
// instrument's when instrumentID is empty.
func (db *DB) utilizationInputs(ctx context.Context, instrumentID string, from, to time.Time) (map[string]*UtilizationInputs, error) {
	fp, err := facilityBillingPolicy(ctx, db.pool)
	if err != nil {
		return nil, err
	}
	var facilityRules []byte
	if err := db.pool.QueryRow(ctx, `SELECT booking_rules FROM facility WHERE id = 1`).Scan(&facilityRules); err != nil {
		return nil, mapError(err, "facility")
	}
	var fo scheduling.RulesOverride
	if err := json.Unmarshal(facilityRules, &fo); err != nil {
		return nil, err
	}
	rows, err := db.pool.Query(ctx, `SELECT id::text, rules_override, billing_override FROM instruments WHERE $1 = '' OR id::text = $1`, instrumentID)
	if err != nil {
		return nil, mapError(err, "instrument")
	}
	out := map[string]*UtilizationInputs{}
	var id string
	var instrumentRules, override []byte
	if _, err := pgx.ForEachRow(rows, []any{&id, &instrumentRules, &override}, func() error {
		var io scheduling.RulesOverride
		var bo scheduling.BillingPolicyOverride
		if err := json.Unmarshal(instrumentRules, &io); err != nil {
			return err
		}
		if err := json.Unmarshal(override, &bo); err != nil {
			return err
		}
		out[id] = &UtilizationInputs{Rules: scheduling.DefaultRules().With(fo).With(io), Policy: fp.With(bo)}
		return nil
	}); err != nil {
		return nil, mapError(err, "instrument")
	}
	if err := utilizationBookings(ctx, db.pool, instrumentID, from, to, out); err != nil {
		return nil, mapError(err, "booking")
	}
	qs, err := db.Quotas(ctx, "")
	if err != nil {
		return nil, err
	}
	for _, q := range qs {
		if in, ok := out[q.InstrumentID]; ok {
			in.Quotas = append(in.Quotas, q)
		}
	}
	return out, nil
}

// utilizationBookings reads the bookings overlapping [from, to) of one instrument (or
// all when instrumentID is empty) into their instruments' inputs: one row per booking
// and usage (NULL usage for a booking without), a flat join the planner can hash, with
// binary timestamps and identifiers. A year of a facility is a million rows, so the
// per-row work is kept small: identifiers stay 16-byte keys (an instrument's or
// project's text is made once), and usages share one backing array.
func utilizationBookings(ctx context.Context, q querier, instrumentID string, from, to time.Time, out map[string]*UtilizationInputs) error {
	// Kind and status travel as their positions in scheduling's lists (1-based), so
	// that no row allocates their text.
	const cols = `
SELECT b.instrument_id, b.id, b.project_id, array_position($3::text[], b.kind), lower(b.during), upper(b.during),
       array_position($4::text[], b.status), b.cancelled_at, b.displaced_by IS NOT NULL, n.booking_id IS NOT NULL,
       u.started_at, u.ended_at
FROM bookings b
LEFT JOIN no_shows n ON n.booking_id = b.id
LEFT JOIN usages u ON u.booking_id = b.id
WHERE b.during && tstzrange($1, $2, '[)')`
	var rows pgx.Rows
	var err error
	kinds := scheduling.BookingKinds
	statuses := []scheduling.BookingStatus{scheduling.StatusActive, scheduling.StatusCancelled}
	if instrumentID == "" {
		rows, err = q.Query(ctx, cols, from, to, kinds, statuses)
	} else {
		rows, err = q.Query(ctx, cols+` AND b.instrument_id = $5`, from, to, kinds, statuses, instrumentID)
	}
	if err != nil {
		return err
	}
	instruments := make(map[[16]byte]*UtilizationInputs, len(out))
	for id, in := range out {
		key, err := uuid.Parse(id)
		if err != nil {
			return err
		}
		instruments[key] = in
	}
	projects := names{}
	type ref struct {
		in *UtilizationInputs
		i  int
	}
	at := map[[16]byte]ref{} // booking → its place, for a booking's further usages
	var (
		b                 scheduling.UtilizationBooking
		inst, id, project pgtype.UUID
		kind, status      pgtype.Int4
		started           pgtype.Timestamptz
		ended             pgtype.Timestamptz
		arena             usageArena
	)
	_, err = pgx.ForEachRow(rows, []any{&inst, &id, &project, &kind, &b.Start, &b.End, &status, &b.CancelledAt,
		&b.Displaced, &b.NoShow, &started, &ended}, func() error {
		in, ok := instruments[inst.Bytes]
		if !ok {
			return nil
		}
		r, seen := at[id.Bytes]
		if !seen {
			if !kind.Valid || !status.Valid {
				return fmt.Errorf("booking %s: a kind or status beamledger does not know", uuid.UUID(id.Bytes))
			}
			b.ProjectID, b.Kind, b.Status = projects.of(project), kinds[kind.Int32-1], statuses[status.Int32-1]
			b.Usages = nil
			r = ref{in, len(in.Bookings)}
			at[id.Bytes] = r
			in.Bookings = append(in.Bookings, b)
		}
		if started.Valid {
			arena.add(&r.in.Bookings[r.i].Usages, "", started.Time, ended)
		}
		return nil
	})
	return err
}
