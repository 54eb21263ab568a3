package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
)

var _ provenance.CalibrationStore = (*DB)(nil)

const calibrationColumns = `c.id::text, c.instrument_id::text, c.kind, c.subject, c.effective_from, c.nominal_camera_length_m,
       c.camera_length_m, c.magnification, c.pixel_size_m, coalesce(c.detector, ''), c.inner_angle_rad,
       c.outer_angle_rad, c.uncertainty_fraction, c.notes, c.recorded_by, c.recorded_at, c.corrects::text,
       c.correction_reason`

const calibrationSelect = `SELECT ` + calibrationColumns + `, (SELECT n.id::text FROM calibrations n WHERE n.corrects = c.id)
FROM calibrations c`

func scanCalibration(row pgx.Row) (provenance.Calibration, error) {
	var c provenance.Calibration
	var kind string
	err := row.Scan(&c.ID, &c.InstrumentID, &kind, &c.Subject, &c.EffectiveFrom, &c.NominalCameraLengthM,
		&c.CameraLengthM, &c.Magnification, &c.PixelSizeM, &c.Detector, &c.InnerAngleRad,
		&c.OuterAngleRad, &c.UncertaintyFraction, &c.Notes, &c.RecordedBy, &c.RecordedAt, &c.Corrects,
		&c.CorrectionReason, &c.CorrectedBy)
	c.Kind = provenance.CalibrationKind(kind)
	return c, err
}

// RecordCalibration implements provenance.CalibrationStore.
func (db *DB) RecordCalibration(ctx context.Context, n provenance.NewCalibration, now time.Time) (provenance.Calibration, error) {
	var out provenance.Calibration
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireInstrument(ctx, tx, n.InstrumentID); err != nil {
			return err
		}
		if err := correctable(ctx, tx, "calibrations", n.InstrumentID, n.Corrects); err != nil {
			return err
		}
		var detector *string
		if n.Detector != "" {
			detector = &n.Detector
		}
		const q = `
INSERT INTO calibrations (instrument_id, kind, subject, effective_from, nominal_camera_length_m, camera_length_m,
    magnification, pixel_size_m, detector, inner_angle_rad, outer_angle_rad, uncertainty_fraction, notes,
    recorded_by, recorded_at, corrects, correction_reason)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17) RETURNING id::text`
		var id string
		if err := tx.QueryRow(ctx, q, n.InstrumentID, string(n.Kind), n.Subject(), n.EffectiveFrom, n.NominalCameraLengthM,
			n.CameraLengthM, n.Magnification, n.PixelSizeM, detector, n.InnerAngleRad, n.OuterAngleRad,
			n.UncertaintyFraction, n.Notes, n.RecordedBy, now, n.Corrects, n.CorrectionReason).Scan(&id); err != nil {
			return err
		}
		var err error
		if out, err = scanCalibration(tx.QueryRow(ctx, calibrationSelect+` WHERE c.id = $1`, id)); err != nil {
			return err
		}
		return appendChange(ctx, tx, n.RecordedBy, correctionAction(n.Corrects), provenance.EntityCalibration, id, now, out)
	})
	return out, correctionError(err, "calibration")
}

// Calibrations implements provenance.CalibrationStore.
func (db *DB) Calibrations(ctx context.Context, instrumentID string, inForceAt *time.Time) ([]provenance.Calibration, error) {
	if !accounts.ValidID(instrumentID) {
		return nil, beamledger.NotFound("instrument")
	}
	if inForceAt != nil {
		out, err := calibrationsAt(ctx, db.pool, instrumentID, *inForceAt)
		return out, mapError(err, "calibration")
	}
	rows, err := db.pool.Query(ctx, calibrationSelect+` WHERE c.instrument_id = $1 ORDER BY c.effective_from DESC, c.recorded_at DESC LIMIT 1000`, instrumentID)
	if err != nil {
		return nil, mapError(err, "calibration")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Calibration, error) { return scanCalibration(r) })
	return out, mapError(err, "calibration")
}

// calibrationsInForce picks, per kind and subject, the newest calibration effective at
// or before $2 that nothing corrects.
const calibrationsInForce = `
SELECT DISTINCT ON (c.kind, c.subject) ` + calibrationColumns + `, NULL::text
FROM calibrations c
WHERE c.instrument_id = $1 AND c.effective_from <= $2
  AND NOT EXISTS (SELECT 1 FROM calibrations n WHERE n.corrects = c.id)
ORDER BY c.kind, c.subject, c.effective_from DESC, c.recorded_at DESC`

func calibrationsAt(ctx context.Context, q querier, instrumentID string, t time.Time) ([]provenance.Calibration, error) {
	rows, err := q.Query(ctx, calibrationsInForce, instrumentID, t)
	if err != nil {
		return nil, err
	}
	return pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Calibration, error) { return scanCalibration(r) })
}
