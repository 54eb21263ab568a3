package postgres

import (
	"context"
	"encoding/json"
	"fmt"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"
	"github.com/jackc/pgx/v5/pgxpool"

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

// UtilizationInputs is what an instrument's utilization report over a range is made
// of: its rules and billing policy in force, the sums of its bookings over the range
// (scheduling.SumUtilization's, computed by the database), and the quotas on it.
type UtilizationInputs struct {
	Rules  scheduling.Rules
	Policy scheduling.BillingPolicy
	Sums   scheduling.UtilizationSums
	Quotas []scheduling.Quota
}

// UtilizationInputs implements the read behind the utilization report, with open
// usage counted until now. ErrNotFound for an unknown instrument.
func (db *DB) UtilizationInputs(ctx context.Context, instrumentID string, from, to, now time.Time) (UtilizationInputs, error) {
	if !accounts.ValidID(instrumentID) {
		return UtilizationInputs{}, beamledger.NotFound("instrument")
	}
	all, err := db.utilizationInputs(ctx, instrumentID, from, to, now)
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
func (db *DB) UtilizationInputsAll(ctx context.Context, from, to, now time.Time) (map[string]*UtilizationInputs, error) {
	return db.utilizationInputs(ctx, "", from, to, now)
}

// utilizationInputs reads the inputs of one instrument's report, or of every
// instrument's when instrumentID is empty.
func (db *DB) utilizationInputs(ctx context.Context, instrumentID string, from, to, now time.Time) (map[string]*UtilizationInputs, error) {
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
	if err := utilizationSums(ctx, db.pool, instrumentID, from, to, now, out); err != nil {
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

// utilizationSums computes scheduling.SumUtilization over the bookings of the
// instruments in out that overlap [from, to), in one aggregate: a million bookings
// come back as a few thousand rows, one per instrument, project and kind. Each
// booking's first usage (ordinal 1), or the booking alone when it has none, carries
// its booked time; every usage carries its used time, which is the union of the
// booking's spans because its usages never overlap (usages_no_overlap). Elapsed times
// come back in microseconds, exact. Active service bookings, few, are read apart
// through their own index, in the same snapshot.
//
// The aggregate runs with a plan made for its arguments each time (the unnamed
// statement): a cached generic plan for it reads a year four times slower.
func utilizationSums(ctx context.Context, db *pgxpool.Pool, instrumentID string, from, to, now time.Time, out map[string]*UtilizationInputs) error {
	const sums = `
SELECT b.instrument_id, b.project_id, array_position($3::text[], b.kind),
       coalesce(extract(epoch FROM sum(CASE WHEN b.status = 'active' AND coalesce(u.ordinal, 1) = 1
           THEN least(upper(b.during), $2) - greatest(lower(b.during), $1) END)) * 1000000, 0)::bigint,
       coalesce(extract(epoch FROM sum(CASE WHEN b.status = 'active' AND u.booking_id IS NOT NULL
           THEN greatest(least(coalesce(u.ended_at, $4), $2) - greatest(u.started_at, $1), interval '0') END)) * 1000000, 0)::bigint,
       coalesce(extract(epoch FROM sum(CASE WHEN b.status = 'active' AND n.booking_id IS NOT NULL AND u.booking_id IS NULL
           THEN least(upper(b.during), $2) - greatest(lower(b.during), $1) END)) * 1000000, 0)::bigint,
       coalesce(extract(epoch FROM sum(CASE WHEN b.status = 'cancelled' AND coalesce(u.ordinal, 1) = 1 AND b.displaced_by IS NULL
               AND lower(b.during) - b.cancelled_at < ($6::bigint[])[array_position($5::uuid[], b.instrument_id)] * interval '1 microsecond'
           THEN least(upper(b.during), $2) - greatest(lower(b.during), $1) END)) * 1000000, 0)::bigint
FROM bookings b
LEFT JOIN no_shows n ON n.booking_id = b.id
LEFT JOIN usages u ON u.booking_id = b.id
WHERE b.during && tstzrange($1, $2, '[)') AND b.kind <> 'service' AND ($7::uuid IS NULL OR b.instrument_id = $7)
GROUP BY b.instrument_id, b.project_id, b.kind`
	const service = `
SELECT instrument_id, greatest(lower(during), $1), least(upper(during), $2) FROM bookings
WHERE kind = 'service' AND status = 'active' AND during && tstzrange($1, $2, '[)') AND ($3::uuid IS NULL OR instrument_id = $3)`
	ids := make([][16]byte, 0, len(out))
	windows := make([]int64, 0, len(out))
	instruments := make(map[[16]byte]*UtilizationInputs, len(out))
	for id, in := range out {
		key, err := uuid.Parse(id)
		if err != nil {
			return err
		}
		instruments[key] = in
		ids = append(ids, key)
		windows = append(windows, (time.Duration(in.Policy.CancellationWindowMinutes) * time.Minute).Microseconds())
	}
	var only pgtype.UUID // every instrument's bookings, or one's
	if instrumentID != "" {
		if err := only.Scan(instrumentID); err != nil {
			return err
		}
	}
	kinds := scheduling.BookingKinds
	return pgx.BeginTxFunc(ctx, db, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly}, func(tx pgx.Tx) error {
		rows, err := tx.Query(ctx, sums, pgx.QueryExecModeDescribeExec, from, to, kinds, now, ids, windows, only)
		if err != nil {
			return err
		}
		projects := names{}
		var (
			inst, project                       pgtype.UUID
			kind                                pgtype.Int4
			booked, used, noShow, cancelledLate int64
		)
		us := func(v int64) time.Duration { return time.Duration(v) * time.Microsecond }
		if _, err := pgx.ForEachRow(rows, []any{&inst, &project, &kind, &booked, &used, &noShow, &cancelledLate}, func() error {
			if !kind.Valid {
				return fmt.Errorf("instrument %s: a booking of a kind beamledger does not know", uuid.UUID(inst.Bytes))
			}
			in, ok := instruments[inst.Bytes]
			if !ok { // made after the instruments were read
				return nil
			}
			in.Sums.Totals = append(in.Sums.Totals, scheduling.UtilizationTotals{ProjectID: projects.of(project), Kind: kinds[kind.Int32-1],
				Booked: us(booked), Used: us(used), NoShow: us(noShow), CancelledLate: us(cancelledLate)})
			return nil
		}); err != nil {
			return err
		}
		rows, err = tx.Query(ctx, service, from, to, only)
		if err != nil {
			return err
		}
		var iv scheduling.Interval
		_, err = pgx.ForEachRow(rows, []any{&inst, &iv.Start, &iv.End}, func() error {
			if in, ok := instruments[inst.Bytes]; ok {
				in.Sums.Service = append(in.Sums.Service, iv)
			}
			return nil
		})
		return err
	})
}
