package postgres

import (
	"context"
	"encoding/json"
	"errors"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/provenance/optics"
	"beamledger/scheduling"
)

var _ provenance.AcquisitionStore = (*DB)(nil)

const versionColumns = `v.version, v.operator_id::text, v.specimen_id::text, v.started_at, v.ended_at, v.notes,
       v.conditions, v.derived, v.fluence_e_per_a2, v.tuning_id::text, v.calibration_ids::text[], v.applied,
       v.warnings, v.reason, v.author, v.created_at`

func versionDest(v *provenance.AcquisitionVersion) []any {
	return []any{&v.Version, &v.OperatorID, &v.SpecimenID, &v.StartedAt, &v.EndedAt, &v.Notes,
		&v.Conditions, &v.Derived, &v.FluenceEPerA2, &v.TuningID, &v.CalibrationIDs, &v.Applied,
		&v.Warnings, &v.Reason, &v.Author, &v.CreatedAt}
}

// acquisitionSelect reads acquisitions at their newest version.
const acquisitionSelect = `
SELECT a.id::text, a.booking_id::text, a.instrument_id::text, a.project_id::text, a.user_id::text,
       a.created_by, a.created_at, ` + versionColumns + `
FROM acquisitions a
JOIN LATERAL (SELECT * FROM acquisition_versions WHERE acquisition_id = a.id ORDER BY version DESC LIMIT 1) v ON true`

func scanAcquisition(row pgx.Row) (provenance.Acquisition, error) {
	var a provenance.Acquisition
	dest := append([]any{&a.ID, &a.BookingID, &a.InstrumentID, &a.ProjectID, &a.UserID, &a.CreatedBy, &a.CreatedAt},
		versionDest(&a.AcquisitionVersion)...)
	err := row.Scan(dest...)
	return a, err
}

// CreateAcquisition implements provenance.AcquisitionStore.
func (db *DB) CreateAcquisition(ctx context.Context, n provenance.NewAcquisition,
	decide func(provenance.AcquisitionContext) (provenance.Draft, error)) (provenance.Acquisition, error) {
	var out provenance.Acquisition
	err := db.retryTx(ctx, func(tx pgx.Tx) error {
		ac, err := acquisitionContext(ctx, tx, n.Input.BookingID, "", n)
		if err != nil {
			return err
		}
		d, err := decide(ac)
		if err != nil {
			return err
		}
		id := uuid.NewString()
		const q = `
INSERT INTO acquisitions (id, booking_id, instrument_id, project_id, user_id, created_by, created_at)
VALUES ($1, $2, $3, $4, $5, $6, $7)`
		b := ac.Booking
		if _, err := tx.Exec(ctx, q, id, b.ID, b.InstrumentID, b.ProjectID, b.UserID, n.Actor, n.Now); err != nil {
			return err
		}
		d.AcquisitionVersion.Version = 1
		if err := insertVersion(ctx, tx, id, d, n.Actor); err != nil {
			return err
		}
		if out, err = scanAcquisition(tx.QueryRow(ctx, acquisitionSelect+` WHERE a.id = $1`, id)); err != nil {
			return err
		}
		return appendChange(ctx, tx, n.Actor, provenance.ActionCreate, provenance.EntityAcquisition, id, n.Now, out)
	})
	return out, mapError(err, "acquisition")
}

// CorrectAcquisition implements provenance.AcquisitionStore.
func (db *DB) CorrectAcquisition(ctx context.Context, id string, n provenance.NewAcquisition,
	decide func(provenance.AcquisitionContext) (provenance.Draft, error)) (provenance.Acquisition, error) {
	if !accounts.ValidID(id) {
		return provenance.Acquisition{}, beamledger.NotFound("acquisition")
	}
	var out provenance.Acquisition
	err := db.retryTx(ctx, func(tx pgx.Tx) error {
		// The lock orders concurrent corrections of one acquisition; each sees the other's
		// version and a stale base_version is refused.
		var bookingID string
		if err := tx.QueryRow(ctx, `SELECT booking_id::text FROM acquisitions WHERE id = $1 FOR UPDATE`, id).Scan(&bookingID); err != nil {
			return err
		}
		ac, err := acquisitionContext(ctx, tx, bookingID, id, n)
		if err != nil {
			return err
		}
		if bv := n.Input.BaseVersion; bv != nil && *bv != ac.Latest.Version {
			return beamledger.Conflict("the acquisition is at version %d, not %d; read it again and correct that", ac.Latest.Version, *bv)
		}
		d, err := decide(ac)
		if err != nil {
			return err
		}
		d.AcquisitionVersion.Version = ac.Latest.Version + 1
		if err := insertVersion(ctx, tx, id, d, n.Actor); err != nil {
			return err
		}
		if out, err = scanAcquisition(tx.QueryRow(ctx, acquisitionSelect+` WHERE a.id = $1`, id)); err != nil {
			return err
		}
		return appendChange(ctx, tx, n.Actor, provenance.ActionCorrect, provenance.EntityAcquisition, id, n.Now, out)
	})
	return out, mapError(err, "acquisition")
}

func insertVersion(ctx context.Context, tx pgx.Tx, id string, d provenance.Draft, author string) error {
	applied, err := json.Marshal(d.Applied)
	if err != nil {
		return err
	}
	warnings, err := json.Marshal(d.Warnings)
	if err != nil {
		return err
	}
	const q = `
INSERT INTO acquisition_versions (acquisition_id, version, operator_id, specimen_id, started_at, ended_at, notes,
    conditions, derived, fluence_e_per_a2, tuning_id, calibration_ids, applied, warnings, reason, author, created_at)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12::uuid[], $13, $14, $15, $16, $17)`
	_, err = tx.Exec(ctx, q, id, d.AcquisitionVersion.Version, d.OperatorID, d.SpecimenID, d.StartedAt, d.EndedAt, d.Notes,
		[]byte(d.Conditions), []byte(d.Derived), d.FluenceEPerA2, d.TuningID, d.CalibrationIDs, applied, warnings,
		d.Reason, author, d.CreatedAt)
	return err
}

// acquisitionContext reads, in tx, what an acquisition on bookingID is recorded against;
// correcting names the acquisition being corrected ("" when creating).
func acquisitionContext(ctx context.Context, tx pgx.Tx, bookingID, correcting string, n provenance.NewAcquisition) (provenance.AcquisitionContext, error) {
	ac := provenance.AcquisitionContext{Now: n.Now}
	if err := readBookingRef(ctx, tx, bookingID, &ac.Booking); err != nil {
		return ac, err
	}
	var err error
	if ac.Instrument, err = scanInstrument(tx.QueryRow(ctx, instrumentSelect+` WHERE i.id = $1`, ac.Booking.InstrumentID)); err != nil {
		return ac, err
	}
	if correcting != "" {
		var v provenance.AcquisitionVersion
		q := `SELECT ` + versionColumns + ` FROM acquisition_versions v WHERE v.acquisition_id = $1 ORDER BY v.version DESC LIMIT 1`
		if err := tx.QueryRow(ctx, q, correcting).Scan(versionDest(&v)...); err != nil {
			return ac, err
		}
		ac.Latest = &v
	}
	in := n.Input
	operator := in.OperatorID
	switch {
	case operator != "":
	case ac.Latest != nil:
		operator = ac.Latest.OperatorID
	default:
		operator = ac.Booking.UserID
	}
	if err := readOperator(ctx, tx, operator, ac.Booking.ProjectID, &ac.Operator); err != nil {
		return ac, err
	}
	if in.SpecimenID != "" {
		if ac.Specimen, ac.FluenceBeforeEPerA2, err = lockedSpecimen(ctx, tx, in.SpecimenID, correcting, in.StartedAt); err != nil {
			return ac, err
		}
	}
	if ac.Tuning, err = tuningInForce(ctx, tx, ac.Booking.InstrumentID, in.StartedAt, n.VoltageV); err != nil {
		return ac, err
	}
	if ac.Calibrations, err = calibrationsAt(ctx, tx, ac.Booking.InstrumentID, in.StartedAt); err != nil {
		return ac, err
	}
	ac.Settings, err = opticsSettings(ctx, tx)
	return ac, err
}

// readBookingRef reads the booking under a share lock, so that it cannot be cancelled
// or moved while an acquisition is being recorded against it.
func readBookingRef(ctx context.Context, tx pgx.Tx, id string, b *provenance.BookingRef) error {
	if !accounts.ValidID(id) {
		return beamledger.NotFound("booking")
	}
	const q = `
SELECT id::text, instrument_id::text, coalesce(project_id::text, ''), user_id::text, coalesce(staff_id::text, ''),
       kind, lower(during), upper(during), status = 'cancelled'
FROM bookings WHERE id = $1 FOR SHARE`
	var kind string
	err := tx.QueryRow(ctx, q, id).Scan(&b.ID, &b.InstrumentID, &b.ProjectID, &b.UserID, &b.StaffID, &kind, &b.Start, &b.End, &b.Cancelled)
	if errors.Is(err, pgx.ErrNoRows) {
		return beamledger.NotFound("booking")
	}
	b.Kind = scheduling.BookingKind(kind)
	return err
}

func readOperator(ctx context.Context, tx pgx.Tx, id, projectID string, op *provenance.OperatorRef) error {
	const q = `
SELECT u.id::text, u.role, u.disabled,
       EXISTS (SELECT 1 FROM projects p WHERE p.id = $2::uuid AND p.principal_investigator_id = u.id)
       OR EXISTS (SELECT 1 FROM project_members m WHERE m.project_id = $2::uuid AND m.user_id = u.id)
FROM users u WHERE u.id = $1`
	var role string
	var project any
	if projectID != "" {
		project = projectID
	}
	err := tx.QueryRow(ctx, q, id, project).Scan(&op.ID, &role, &op.Disabled, &op.Member)
	if errors.Is(err, pgx.ErrNoRows) {
		return beamledger.InvalidField("operator_id", "no such user")
	}
	op.Role = accounts.Role(role)
	return err
}

// lockedSpecimen reads a specimen under an update lock (which fires no trigger), so
// that acquisitions on one specimen weigh its fluence budget one after another, and
// the fluence of its acquisitions that started before this one began.
func lockedSpecimen(ctx context.Context, tx pgx.Tx, id, correcting string, start time.Time) (*provenance.Specimen, float64, error) {
	if _, err := tx.Exec(ctx, `SELECT 1 FROM specimens WHERE id = $1 FOR UPDATE`, id); err != nil {
		return nil, 0, err
	}
	var exclude any
	if correcting != "" {
		exclude = correcting
	}
	sp, before, err := scanSpecimenBefore(tx.QueryRow(ctx, specimenSelectFor("$2::uuid", "$3")+` WHERE s.id = $1`, id, exclude, start))
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, 0, beamledger.InvalidField("specimen_id", "no such specimen")
	}
	return &sp, before, err
}

// Acquisition implements provenance.AcquisitionStore.
func (db *DB) Acquisition(ctx context.Context, id string) (provenance.Acquisition, error) {
	if !accounts.ValidID(id) {
		return provenance.Acquisition{}, beamledger.NotFound("acquisition")
	}
	a, err := scanAcquisition(db.pool.QueryRow(ctx, acquisitionSelect+` WHERE a.id = $1`, id))
	return a, mapError(err, "acquisition")
}

// AcquisitionHistory implements provenance.AcquisitionStore.
func (db *DB) AcquisitionHistory(ctx context.Context, id string) ([]provenance.AcquisitionVersion, error) {
	if !accounts.ValidID(id) {
		return nil, beamledger.NotFound("acquisition")
	}
	rows, err := db.pool.Query(ctx, `SELECT `+versionColumns+` FROM acquisition_versions v WHERE v.acquisition_id = $1 ORDER BY v.version`, id)
	if err != nil {
		return nil, mapError(err, "acquisition")
	}
	vs, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.AcquisitionVersion, error) {
		var v provenance.AcquisitionVersion
		return v, r.Scan(versionDest(&v)...)
	})
	if err == nil && len(vs) == 0 {
		return nil, beamledger.NotFound("acquisition")
	}
	return vs, mapError(err, "acquisition")
}

// Acquisitions implements provenance.AcquisitionStore.
func (db *DB) Acquisitions(ctx context.Context, f provenance.AcquisitionFilter) ([]provenance.Acquisition, error) {
	var w filter
	if err := w.ids([2]string{"a.booking_id", f.BookingID}, [2]string{"a.instrument_id", f.InstrumentID},
		[2]string{"a.project_id", f.ProjectID}, [2]string{"v.specimen_id", f.SpecimenID}); err != nil {
		return nil, err
	}
	if f.ProjectIDs != nil {
		w.where("a.project_id = ANY(" + w.arg(f.ProjectIDs) + "::uuid[])")
	}
	limit := f.Limit
	if limit <= 0 || limit > 500 {
		limit = 500
	}
	rows, err := db.pool.Query(ctx, acquisitionSelect+w.sql()+` ORDER BY v.started_at DESC, a.id LIMIT `+w.arg(limit), w.args...)
	if err != nil {
		return nil, mapError(err, "acquisition")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Acquisition, error) { return scanAcquisition(r) })
	return out, mapError(err, "acquisition")
}

// opticsSettings reads the facility's detector-regime settings over the defaults.
func opticsSettings(ctx context.Context, q querier) (optics.Settings, error) {
	s := optics.DefaultSettings()
	var raw []byte
	if err := q.QueryRow(ctx, `SELECT optics_settings FROM facility WHERE id = 1`).Scan(&raw); err != nil {
		if errors.Is(err, pgx.ErrNoRows) {
			return s, nil
		}
		return s, err
	}
	return s, json.Unmarshal(raw, &s)
}

// OpticsSettings returns the facility's optics settings (defaults where unset).
func (db *DB) OpticsSettings(ctx context.Context) (optics.Settings, error) {
	s, err := opticsSettings(ctx, db.pool)
	return s, mapError(err, "facility")
}

// SetOpticsSettings replaces the facility's optics settings. ErrNotFound before the
// facility is set up.
func (db *DB) SetOpticsSettings(ctx context.Context, s optics.Settings) (optics.Settings, error) {
	raw, err := json.Marshal(s)
	if err != nil {
		return s, err
	}
	tag, err := db.pool.Exec(ctx, `UPDATE facility SET optics_settings = $1 WHERE id = 1`, raw)
	if err == nil && tag.RowsAffected() == 0 {
		return s, beamledger.NotFound("facility")
	}
	return s, mapError(err, "facility")
}
