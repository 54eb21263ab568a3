package postgres

import (
	"context"
	"encoding/json"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
)

var _ provenance.TuningStore = (*DB)(nil)

const tuningSelect = `
SELECT t.id::text, t.instrument_id::text, t.measured_at, t.voltage_v, t.coefficients, t.notes, t.recorded_by,
       t.recorded_at, t.corrects::text, t.correction_reason, (SELECT c.id::text FROM tunings c WHERE c.corrects = t.id)
FROM tunings t`

func scanTuning(row pgx.Row) (provenance.Tuning, error) {
	var t provenance.Tuning
	err := row.Scan(&t.ID, &t.InstrumentID, &t.MeasuredAt, &t.VoltageV, &t.Coefficients, &t.Notes, &t.RecordedBy,
		&t.RecordedAt, &t.Corrects, &t.CorrectionReason, &t.CorrectedBy)
	return t, err
}

// RecordTuning implements provenance.TuningStore.
func (db *DB) RecordTuning(ctx context.Context, n provenance.NewTuning, now time.Time) (provenance.Tuning, error) {
	var out provenance.Tuning
	coefficients, err := json.Marshal(n.Coefficients)
	if err != nil {
		return out, err
	}
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireInstrument(ctx, tx, n.InstrumentID); err != nil {
			return err
		}
		if err := correctable(ctx, tx, "tunings", n.InstrumentID, n.Corrects); err != nil {
			return err
		}
		const q = `
INSERT INTO tunings (instrument_id, measured_at, voltage_v, coefficients, notes, recorded_by, recorded_at, corrects, correction_reason)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9) RETURNING id::text`
		var id string
		if err := tx.QueryRow(ctx, q, n.InstrumentID, n.MeasuredAt, n.VoltageV, coefficients, n.Notes, n.RecordedBy, now,
			n.Corrects, n.CorrectionReason).Scan(&id); err != nil {
			return err
		}
		if out, err = scanTuning(tx.QueryRow(ctx, tuningSelect+` WHERE t.id = $1`, id)); err != nil {
			return err
		}
		return appendChange(ctx, tx, n.RecordedBy, correctionAction(n.Corrects), provenance.EntityTuning, id, now, out)
	})
	return out, correctionError(err, "tuning")
}

// Tuning implements provenance.TuningStore.
func (db *DB) Tuning(ctx context.Context, id string) (provenance.Tuning, error) {
	if !accounts.ValidID(id) {
		return provenance.Tuning{}, beamledger.NotFound("tuning")
	}
	t, err := scanTuning(db.pool.QueryRow(ctx, tuningSelect+` WHERE t.id = $1`, id))
	return t, mapError(err, "tuning")
}

// Tunings implements provenance.TuningStore.
func (db *DB) Tunings(ctx context.Context, instrumentID string) ([]provenance.Tuning, error) {
	if !accounts.ValidID(instrumentID) {
		return nil, beamledger.NotFound("instrument")
	}
	rows, err := db.pool.Query(ctx, tuningSelect+` WHERE t.instrument_id = $1 ORDER BY t.measured_at DESC, t.recorded_at DESC LIMIT 1000`, instrumentID)
	if err != nil {
		return nil, mapError(err, "tuning")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Tuning, error) { return scanTuning(r) })
	return out, mapError(err, "tuning")
}

// tuningInForce reads the tuning in force at t for an acquisition at voltageV: the
// newest measured at or before t that nothing corrects, measured at the same voltage
// (to 0.1 %) or at an unrecorded one. A corrector tuned at 300 kV says nothing about
// its state at 80 kV.
func tuningInForce(ctx context.Context, tx pgx.Tx, instrumentID string, t time.Time, voltageV float64) (*provenance.Tuning, error) {
	const q = tuningSelect + `
WHERE t.instrument_id = $1 AND t.measured_at <= $2
  AND (t.voltage_v IS NULL OR abs(t.voltage_v - $3) <= 1e-3 * $3)
  AND NOT EXISTS (SELECT 1 FROM tunings c WHERE c.corrects = t.id)
ORDER BY t.measured_at DESC, t.recorded_at DESC LIMIT 1`
	tu, err := scanTuning(tx.QueryRow(ctx, q, instrumentID, t, voltageV))
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, nil
	}
	return &tu, err
}

// correctable checks, under a lock, that a record named by a correction exists on the
// same instrument; a second correction of one record then fails on the unique
// "corrects" column, which correctionError words.
func correctable(ctx context.Context, tx pgx.Tx, table, instrumentID string, corrects *string) error {
	if corrects == nil {
		return nil
	}
	if !accounts.ValidID(*corrects) {
		return beamledger.InvalidField("corrects", "must be an id")
	}
	var inst string
	err := tx.QueryRow(ctx, `SELECT instrument_id::text FROM `+pgx.Identifier{table}.Sanitize()+` WHERE id = $1 FOR SHARE`, *corrects).Scan(&inst)
	switch {
	case errors.Is(err, pgx.ErrNoRows):
		return beamledger.InvalidField("corrects", "no such record")
	case err != nil:
		return err
	case inst != instrumentID:
		return beamledger.InvalidField("corrects", "belongs to another instrument")
	}
	return nil
}

// correctionAction names the ledger action of a record that may correct another.
func correctionAction(corrects *string) string {
	if corrects != nil {
		return provenance.ActionCorrect
	}
	return provenance.ActionCreate
}

// correctionError words a second correction of one record as a conflict.
func correctionError(err error, what string) error {
	if isConstraint(err, "tunings_corrects_key") || isConstraint(err, "calibrations_corrects_key") {
		return beamledger.Conflict("that %s was already corrected; correct the correction instead", what)
	}
	return mapError(err, what)
}
