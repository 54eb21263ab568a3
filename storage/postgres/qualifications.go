package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

var _ scheduling.QualificationStore = (*DB)(nil)

const qualificationColumns = `id::text, user_id::text, instrument_id::text, level, granted_by::text, granted_at, reason,
    expires_after_idle_days, last_used_at, revoked_at, coalesce(revoked_by::text, ''), coalesce(revoke_reason, '')`

func scanQualification(row pgx.Row) (scheduling.Qualification, error) {
	var q scheduling.Qualification
	var level string
	err := row.Scan(&q.ID, &q.UserID, &q.InstrumentID, &level, &q.GrantedBy, &q.GrantedAt, &q.Reason,
		&q.ExpiresAfterIdleDays, &q.LastUsedAt, &q.RevokedAt, &q.RevokedBy, &q.RevokeReason)
	q.Level = scheduling.QualificationLevel(level)
	return q, err
}

// GrantQualification implements scheduling.QualificationStore.
func (db *DB) GrantQualification(ctx context.Context, n scheduling.NewQualification, now time.Time) (scheduling.Qualification, error) {
	var out scheduling.Qualification
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireUser(ctx, tx, n.UserID, "user_id"); err != nil {
			return err
		}
		if err := requireInstrument(ctx, tx, n.InstrumentID); err != nil {
			return err
		}
		const supersede = `
UPDATE qualifications SET revoked_at = $3, revoked_by = $4, revoke_reason = 'superseded'
WHERE user_id = $1 AND instrument_id = $2 AND revoked_at IS NULL RETURNING ` + qualificationColumns
		rows, err := tx.Query(ctx, supersede, n.UserID, n.InstrumentID, now, n.GrantedBy)
		if err != nil {
			return err
		}
		old, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.Qualification, error) { return scanQualification(r) })
		if err != nil {
			return err
		}
		for _, q := range old {
			if err := appendChange(ctx, tx, n.GrantedBy, provenance.ActionRevoke, provenance.EntityQualification, q.ID, now, q); err != nil {
				return err
			}
		}
		const q = `
INSERT INTO qualifications (user_id, instrument_id, level, granted_by, granted_at, reason, expires_after_idle_days)
VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING ` + qualificationColumns
		out, err = scanQualification(tx.QueryRow(ctx, q, n.UserID, n.InstrumentID, string(n.Level), n.GrantedBy, now, n.Reason, n.ExpiresAfterIdleDays))
		if err != nil {
			return err
		}
		return appendChange(ctx, tx, n.GrantedBy, provenance.ActionCreate, provenance.EntityQualification, out.ID, now, out)
	})
	return out, mapError(err, "qualification")
}

// RevokeQualification implements scheduling.QualificationStore.
func (db *DB) RevokeQualification(ctx context.Context, id, by, reason string, now time.Time) (scheduling.Qualification, error) {
	if !accounts.ValidID(id) {
		return scheduling.Qualification{}, beamledger.NotFound("qualification")
	}
	var out scheduling.Qualification
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		cur, err := scanQualification(tx.QueryRow(ctx, `SELECT `+qualificationColumns+` FROM qualifications WHERE id = $1 FOR UPDATE`, id))
		if err != nil {
			return err
		}
		if cur.RevokedAt != nil {
			return beamledger.Conflict("the qualification was already revoked on %s", cur.RevokedAt.UTC().Format(time.RFC3339))
		}
		const q = `UPDATE qualifications SET revoked_at = $2, revoked_by = $3, revoke_reason = $4 WHERE id = $1 RETURNING ` + qualificationColumns
		if out, err = scanQualification(tx.QueryRow(ctx, q, id, now, by, reason)); err != nil {
			return err
		}
		return appendChange(ctx, tx, by, provenance.ActionRevoke, provenance.EntityQualification, out.ID, now, out)
	})
	return out, mapError(err, "qualification")
}

// Qualification implements scheduling.QualificationStore.
func (db *DB) Qualification(ctx context.Context, id string) (scheduling.Qualification, error) {
	if !accounts.ValidID(id) {
		return scheduling.Qualification{}, beamledger.NotFound("qualification")
	}
	q, err := scanQualification(db.pool.QueryRow(ctx, `SELECT `+qualificationColumns+` FROM qualifications WHERE id = $1`, id))
	return q, mapError(err, "qualification")
}

// Qualifications implements scheduling.QualificationStore.
func (db *DB) Qualifications(ctx context.Context, f scheduling.QualificationFilter) ([]scheduling.Qualification, error) {
	var w filter
	if err := w.ids([2]string{"user_id", f.UserID}, [2]string{"instrument_id", f.InstrumentID}); err != nil {
		return nil, err
	}
	if !f.IncludeRevoked {
		w.where("revoked_at IS NULL")
	}
	q := `SELECT ` + qualificationColumns + ` FROM qualifications` + w.sql()
	rows, err := db.pool.Query(ctx, q+` ORDER BY granted_at DESC, id`, w.args...)
	if err != nil {
		return nil, mapError(err, "qualification")
	}
	qs, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.Qualification, error) { return scanQualification(r) })
	return qs, mapError(err, "qualification")
}

func requireInstrument(ctx context.Context, tx pgx.Tx, id string) error {
	if !accounts.ValidID(id) {
		return beamledger.NotFound("instrument")
	}
	var ok bool
	if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM instruments WHERE id = $1)`, id).Scan(&ok); err != nil {
		return err
	}
	if !ok {
		return beamledger.NotFound("instrument")
	}
	return nil
}
