package postgres

import (
	"context"
	"encoding/json"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

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
// period starts in [from, to). Monthly-cap and adjustment lines name no instrument and
// are not counted: they are not any one instrument's recovery.
func (db *DB) IssuedChargesByInstrument(ctx context.Context, from, to time.Time) (map[string]int64, error) {
	const q = `
SELECT l.instrument_id::text, sum(l.amount_minor)::bigint
FROM statement_lines l JOIN statements s ON s.id = l.statement_id
WHERE s.status = 'issued' AND s.period_start >= $1 AND s.period_start < $2 AND l.instrument_id IS NOT NULL
GROUP BY l.instrument_id`
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
	var in UtilizationInputs
	if !accounts.ValidID(instrumentID) {
		return in, beamledger.NotFound("instrument")
	}
	var facilityRules, instrumentRules, override []byte
	err := db.pool.QueryRow(ctx, `
SELECT f.booking_rules, i.rules_override, i.billing_override FROM facility f CROSS JOIN instruments i
WHERE f.id = 1 AND i.id = $1`, instrumentID).Scan(&facilityRules, &instrumentRules, &override)
	if err != nil {
		return in, mapError(err, "instrument")
	}
	var fo, io scheduling.RulesOverride
	var bo scheduling.BillingPolicyOverride
	for _, u := range []struct {
		raw []byte
		v   any
	}{{facilityRules, &fo}, {instrumentRules, &io}, {override, &bo}} {
		if err := json.Unmarshal(u.raw, u.v); err != nil {
			return in, err
		}
	}
	in.Rules = scheduling.DefaultRules().With(fo).With(io)
	fp, err := facilityBillingPolicy(ctx, db.pool)
	if err != nil {
		return in, err
	}
	in.Policy = fp.With(bo)
	// One row per booking and usage (a booking without usage has one row with NULL
	// usage), in booking order: a flat join the planner can hash, and binary
	// timestamps instead of JSON, matter at a year of bookings.
	const q = `
SELECT b.id::text, coalesce(b.project_id::text, ''), b.kind, lower(b.during), upper(b.during), b.status, b.cancelled_at,
       b.displaced_by IS NOT NULL, n.booking_id IS NOT NULL, u.started_at, u.ended_at
FROM bookings b
LEFT JOIN no_shows n ON n.booking_id = b.id
LEFT JOIN usages u ON u.booking_id = b.id
WHERE b.instrument_id = $1 AND b.during && tstzrange($2, $3, '[)')
ORDER BY b.id`
	rows, err := db.pool.Query(ctx, q, instrumentID, from, to)
	if err != nil {
		return in, mapError(err, "booking")
	}
	var b scheduling.UtilizationBooking
	var kind, status string
	var started, ended *time.Time
	_, err = pgx.ForEachRow(rows, []any{&b.ID, &b.ProjectID, &kind, &b.Start, &b.End, &status, &b.CancelledAt, &b.Displaced, &b.NoShow, &started, &ended}, func() error {
		if n := len(in.Bookings); n == 0 || in.Bookings[n-1].ID != b.ID {
			b.Kind, b.Status, b.Usages = scheduling.BookingKind(kind), scheduling.BookingStatus(status), nil
			in.Bookings = append(in.Bookings, b)
		}
		if started != nil {
			last := &in.Bookings[len(in.Bookings)-1]
			last.Usages = append(last.Usages, scheduling.Usage{BookingID: b.ID, StartedAt: *started, EndedAt: ended})
		}
		return nil
	})
	if err != nil {
		return in, mapError(err, "booking")
	}
	qs, err := db.Quotas(ctx, "")
	if err != nil {
		return in, err
	}
	for _, q := range qs {
		if q.InstrumentID == instrumentID {
			in.Quotas = append(in.Quotas, q)
		}
	}
	return in, nil
}
