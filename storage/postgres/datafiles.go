package postgres

import (
	"context"
	"encoding/hex"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
)

var _ provenance.FileStore = (*DB)(nil)

const fileColumns = `f.id::text, f.project_id::text, f.acquisition_id::text, coalesce(encode(f.sha256, 'hex'), ''),
       coalesce(f.size_bytes, 0), f.media_type, f.file_name, f.store, coalesce(f.object_key, ''), f.status,
       f.uploaded_by, f.created_at, f.stored_at`

func scanFile(row pgx.Row) (provenance.DataFile, error) {
	var f provenance.DataFile
	var status string
	err := row.Scan(&f.ID, &f.ProjectID, &f.AcquisitionID, &f.SHA256, &f.SizeBytes, &f.MediaType, &f.FileName, &f.Store,
		&f.ObjectKey, &status, &f.UploadedBy, &f.CreatedAt, &f.StoredAt)
	f.Status = provenance.FileStatus(status)
	return f, err
}

// RecordFile implements provenance.FileStore.
func (db *DB) RecordFile(ctx context.Context, n provenance.NewDataFile, now time.Time) (provenance.DataFile, bool, error) {
	digest, err := hex.DecodeString(n.SHA256)
	if err != nil || len(digest) != 32 {
		return provenance.DataFile{}, false, beamledger.InvalidField("sha256", "must be 64 hex digits")
	}
	var acquisition any
	if n.AcquisitionID != "" {
		acquisition = n.AcquisitionID
	}
	// ON CONFLICT DO NOTHING against the partial unique indexes, then read whichever
	// record holds these bytes for the target: ours, or the one a retry finds.
	const q = `
INSERT INTO data_files AS f (project_id, acquisition_id, sha256, size_bytes, media_type, file_name, store, object_key,
    status, uploaded_by, created_at, stored_at)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, 'stored', $9, $10, $10)
ON CONFLICT DO NOTHING
RETURNING ` + fileColumns
	key := provenance.ObjectKey(n.SHA256)
	var f provenance.DataFile
	created := false
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var err error
		f, err = scanFile(tx.QueryRow(ctx, q, n.ProjectID, acquisition, digest, n.SizeBytes, n.MediaType, n.FileName, n.Store, key,
			n.UploadedBy, now))
		if errors.Is(err, pgx.ErrNoRows) {
			// Nothing was created, so nothing is recorded in the ledger: the existing
			// record has its own event.
			const existing = `SELECT ` + fileColumns + ` FROM data_files f
WHERE f.status = 'stored' AND f.sha256 = $1 AND f.project_id = $2 AND f.acquisition_id IS NOT DISTINCT FROM $3::uuid`
			f, err = scanFile(tx.QueryRow(ctx, existing, digest, n.ProjectID, acquisition))
			return err
		}
		if err != nil {
			return err
		}
		created = true
		return appendChange(ctx, tx, n.UploadedBy, provenance.ActionCreate, provenance.EntityDataFile, f.ID, now, f)
	})
	if isConstraint(err, "data_files_acquisition_id_fkey") {
		return f, false, beamledger.InvalidField("acquisition_id", "no such acquisition")
	}
	return f, created && err == nil, mapError(err, "data file")
}

// DataFile implements provenance.FileStore.
func (db *DB) DataFile(ctx context.Context, id string) (provenance.DataFile, error) {
	if !accounts.ValidID(id) {
		return provenance.DataFile{}, beamledger.NotFound("data file")
	}
	f, err := scanFile(db.pool.QueryRow(ctx, `SELECT `+fileColumns+` FROM data_files f WHERE f.id = $1`, id))
	return f, mapError(err, "data file")
}

// DataFiles implements provenance.FileStore.
func (db *DB) DataFiles(ctx context.Context, ff provenance.FileFilter) ([]provenance.DataFile, error) {
	var w filter
	if err := w.ids([2]string{"f.acquisition_id", ff.AcquisitionID}, [2]string{"f.project_id", ff.ProjectID}); err != nil {
		return nil, err
	}
	if ff.SHA256 != "" {
		digest, err := hex.DecodeString(ff.SHA256)
		if err != nil || len(digest) != 32 {
			return nil, beamledger.InvalidField("sha256", "must be 64 hex digits")
		}
		w.where("f.sha256 = " + w.arg(digest))
	}
	if ff.ProjectIDs != nil {
		w.where("f.project_id = ANY(" + w.arg(ff.ProjectIDs) + "::uuid[])")
	}
	limit := ff.Limit
	if limit <= 0 || limit > 1000 {
		limit = 1000
	}
	rows, err := db.pool.Query(ctx, `SELECT `+fileColumns+` FROM data_files f`+w.sql()+` ORDER BY f.created_at DESC, f.id LIMIT `+w.arg(limit), w.args...)
	if err != nil {
		return nil, mapError(err, "data file")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.DataFile, error) { return scanFile(r) })
	return out, mapError(err, "data file")
}

// ObjectStored implements provenance.FileStore.
func (db *DB) ObjectStored(ctx context.Context, sha256Hex string) (bool, error) {
	digest, err := hex.DecodeString(sha256Hex)
	if err != nil || len(digest) != 32 {
		return false, beamledger.InvalidField("sha256", "must be 64 hex digits")
	}
	var ok bool
	err = db.pool.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM data_files WHERE sha256 = $1 AND status = 'stored')`, digest).Scan(&ok)
	return ok, mapError(err, "data file")
}
