package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

const instrumentSelect = `
SELECT i.id::text, i.code, i.name, i.kind, i.location, i.bookable, i.accelerating_voltages_v, i.corrector,
       i.camera_length_min_m, i.camera_length_max_m, i.condition_checks, i.created_at, i.updated_at,
       coalesce((SELECT jsonb_agg(jsonb_strip_nulls(jsonb_build_object('name', d.name, 'kind', d.kind,
                 'inner_radius_m', d.inner_radius_m, 'outer_radius_m', d.outer_radius_m)) ORDER BY d.position)
                 FROM detectors d WHERE d.instrument_id = i.id), '[]')
FROM instruments i`

func scanInstrument(row pgx.Row) (scheduling.Instrument, error) {
	var in scheduling.Instrument
	var kind, corrector, checks string
	err := row.Scan(&in.ID, &in.Code, &in.Name, &kind, &in.Location, &in.Bookable, &in.AcceleratingVoltagesV,
		&corrector, &in.CameraLengthMinM, &in.CameraLengthMaxM, &checks, &in.CreatedAt, &in.UpdatedAt, &in.Detectors)
	in.Kind, in.Corrector = scheduling.InstrumentKind(kind), scheduling.Corrector(corrector)
	in.ConditionChecks = scheduling.ConditionChecks(checks)
	return in, err
}

// CreateInstrument implements scheduling.InstrumentStore.
func (db *DB) CreateInstrument(ctx context.Context, in scheduling.Instrument, actor string, now time.Time) (scheduling.Instrument, error) {
	var out scheduling.Instrument
	if in.ConditionChecks == "" {
		in.ConditionChecks = scheduling.ConditionChecksError
	}
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		const q = `
INSERT INTO instruments (code, name, kind, location, bookable, accelerating_voltages_v, corrector,
    camera_length_min_m, camera_length_max_m, condition_checks)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10) RETURNING id::text`
		volts := in.AcceleratingVoltagesV
		if volts == nil {
			volts = []float64{} // a tool without a beam, such as a plasma cleaner
		}
		var id string
		if err := tx.QueryRow(ctx, q, in.Code, in.Name, string(in.Kind), in.Location, in.Bookable,
			volts, string(in.Corrector), in.CameraLengthMinM, in.CameraLengthMaxM, string(in.ConditionChecks)).Scan(&id); err != nil {
			return err
		}
		if err := insertDetectors(ctx, tx, id, in.Detectors); err != nil {
			return err
		}
		var err error
		if out, err = scanInstrument(tx.QueryRow(ctx, instrumentSelect+` WHERE i.id = $1`, id)); err != nil {
			return err
		}
		return appendChange(ctx, tx, actor, provenance.ActionCreate, provenance.EntityInstrument, id, now, out)
	})
	return out, mapError(err, "instrument")
}

// Instrument implements scheduling.InstrumentStore.
func (db *DB) Instrument(ctx context.Context, id string) (scheduling.Instrument, error) {
	if !accounts.ValidID(id) {
		return scheduling.Instrument{}, beamledger.NotFound("instrument")
	}
	in, err := scanInstrument(db.pool.QueryRow(ctx, instrumentSelect+` WHERE i.id = $1`, id))
	return in, mapError(err, "instrument")
}

// SetConditionLimits implements scheduling.InstrumentStore.
func (db *DB) SetConditionLimits(ctx context.Context, id string, l scheduling.ConditionLimits, actor string, now time.Time) (scheduling.Instrument, error) {
	return db.changeInstrument(ctx, id, actor, now, func(tx pgx.Tx) (pgconn.CommandTag, error) {
		const q = `
UPDATE instruments SET camera_length_min_m = $2, camera_length_max_m = $3, condition_checks = $4, updated_at = now()
WHERE id = $1`
		return tx.Exec(ctx, q, id, l.CameraLengthMinM, l.CameraLengthMaxM, string(l.ConditionChecks))
	})
}

// SetInstrumentBookable implements scheduling.InstrumentStore.
func (db *DB) SetInstrumentBookable(ctx context.Context, id string, bookable bool, actor string, now time.Time) (scheduling.Instrument, error) {
	return db.changeInstrument(ctx, id, actor, now, func(tx pgx.Tx) (pgconn.CommandTag, error) {
		return tx.Exec(ctx, `UPDATE instruments SET bookable = $2, updated_at = now() WHERE id = $1`, id, bookable)
	})
}

// SetInstrumentCapabilities implements scheduling.InstrumentStore.
func (db *DB) SetInstrumentCapabilities(ctx context.Context, in scheduling.Instrument, actor string, now time.Time) (scheduling.Instrument, error) {
	return db.changeInstrument(ctx, in.ID, actor, now, func(tx pgx.Tx) (pgconn.CommandTag, error) {
		const q = `
UPDATE instruments SET name = $2, kind = $3, location = $4, accelerating_voltages_v = $5, corrector = $6, updated_at = now()
WHERE id = $1`
		tag, err := tx.Exec(ctx, q, in.ID, in.Name, string(in.Kind), in.Location, in.AcceleratingVoltagesV, string(in.Corrector))
		if err != nil || tag.RowsAffected() == 0 {
			return tag, err
		}
		if _, err := tx.Exec(ctx, `DELETE FROM detectors WHERE instrument_id = $1`, in.ID); err != nil {
			return tag, err
		}
		return tag, insertDetectors(ctx, tx, in.ID, in.Detectors)
	})
}

// changeInstrument runs update (which reports the rows it changed) in a transaction
// with a ledger event holding the instrument as it then stands, and returns it.
// ErrNotFound when update changed nothing.
func (db *DB) changeInstrument(ctx context.Context, id, actor string, now time.Time, update func(pgx.Tx) (pgconn.CommandTag, error)) (scheduling.Instrument, error) {
	if !accounts.ValidID(id) {
		return scheduling.Instrument{}, beamledger.NotFound("instrument")
	}
	var out scheduling.Instrument
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		tag, err := update(tx)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return beamledger.NotFound("instrument")
		}
		if out, err = scanInstrument(tx.QueryRow(ctx, instrumentSelect+` WHERE i.id = $1`, id)); err != nil {
			return err
		}
		return appendChange(ctx, tx, actor, provenance.ActionCorrect, provenance.EntityInstrument, id, now, out)
	})
	return out, mapError(err, "instrument")
}

// insertDetectors writes an instrument's detectors in their order.
func insertDetectors(ctx context.Context, tx pgx.Tx, instrumentID string, ds []scheduling.Detector) error {
	for i, d := range ds {
		const q = `INSERT INTO detectors (instrument_id, name, kind, inner_radius_m, outer_radius_m, position) VALUES ($1, $2, $3, $4, $5, $6)`
		if _, err := tx.Exec(ctx, q, instrumentID, d.Name, string(d.Kind), d.InnerRadiusM, d.OuterRadiusM, i); err != nil {
			return err
		}
	}
	return nil
}

// InstrumentByCode implements scheduling.InstrumentStore.
func (db *DB) InstrumentByCode(ctx context.Context, code string) (scheduling.Instrument, error) {
	in, err := scanInstrument(db.pool.QueryRow(ctx, instrumentSelect+` WHERE i.code = $1`, code))
	return in, mapError(err, "instrument")
}

// Instruments implements scheduling.InstrumentStore.
func (db *DB) Instruments(ctx context.Context) ([]scheduling.Instrument, error) {
	rows, err := db.pool.Query(ctx, instrumentSelect+` ORDER BY i.code`)
	if err != nil {
		return nil, mapError(err, "instrument")
	}
	ins, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.Instrument, error) { return scanInstrument(r) })
	return ins, mapError(err, "instrument")
}
