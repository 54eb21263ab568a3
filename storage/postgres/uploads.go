package postgres

import (
	"context"
	"encoding/hex"
	"encoding/json"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
)

var _ provenance.UploadStore = (*DB)(nil)

const uploadColumns = `u.id::text, u.data_file_id::text, f.project_id::text, u.store, u.object_key, u.multipart_id,
       u.length_bytes, u.upload_offset, u.part_size_bytes, u.parts, u.segments, u.hash_state,
       coalesce(encode(u.declared_sha256, 'hex'), ''), f.media_type, u.created_by, u.created_at, u.last_activity`

const uploadFrom = ` FROM uploads u JOIN data_files f ON f.id = u.data_file_id`

func scanUpload(row pgx.Row) (provenance.Upload, error) {
	var u provenance.Upload
	var parts, segments []byte
	err := row.Scan(&u.ID, &u.DataFileID, &u.ProjectID, &u.Store, &u.ObjectKey, &u.MultipartID, &u.LengthBytes, &u.OffsetBytes,
		&u.PartSizeBytes, &parts, &segments, &u.HashState, &u.DeclaredSHA256, &u.MediaType, &u.CreatedBy, &u.CreatedAt, &u.LastActivity)
	if err != nil {
		return u, err
	}
	if err := json.Unmarshal(parts, &u.Parts); err != nil {
		return u, err
	}
	return u, json.Unmarshal(segments, &u.Segments)
}

// CreateUpload implements provenance.UploadStore.
func (db *DB) CreateUpload(ctx context.Context, id string, n provenance.NewUpload, now time.Time) (provenance.Upload, error) {
	var declared any
	if n.DeclaredSHA256 != "" {
		d, err := hex.DecodeString(n.DeclaredSHA256)
		if err != nil || len(d) != 32 {
			return provenance.Upload{}, beamledger.InvalidField("sha256", "must be 64 hex digits")
		}
		declared = d
	}
	var acquisition any
	if n.File.AcquisitionID != "" {
		acquisition = n.File.AcquisitionID
	}
	var u provenance.Upload
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var fileID string
		err := tx.QueryRow(ctx, `
INSERT INTO data_files (project_id, acquisition_id, media_type, file_name, store, status, uploaded_by, created_at)
VALUES ($1, $2, $3, $4, $5, 'pending', $6, $7) RETURNING id::text`,
			n.File.ProjectID, acquisition, n.File.MediaType, n.File.FileName, n.File.Store, n.File.UploadedBy, now).Scan(&fileID)
		if err != nil {
			return err
		}
		_, err = tx.Exec(ctx, `
INSERT INTO uploads (id, data_file_id, store, object_key, multipart_id, length_bytes, part_size_bytes, hash_state,
    declared_sha256, created_by, created_at, last_activity)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $11)`,
			id, fileID, n.File.Store, n.ObjectKey, n.MultipartID, n.LengthBytes, n.PartSizeBytes, n.HashState, declared, n.File.UploadedBy, now)
		if err != nil {
			return err
		}
		u, err = scanUpload(tx.QueryRow(ctx, `SELECT `+uploadColumns+uploadFrom+` WHERE u.id = $1`, id))
		return err
	})
	if isConstraint(err, "data_files_acquisition_id_fkey") {
		return u, beamledger.InvalidField("acquisition_id", "no such acquisition")
	}
	return u, mapError(err, "upload")
}

// Upload implements provenance.UploadStore.
func (db *DB) Upload(ctx context.Context, id string) (provenance.Upload, error) {
	if !accounts.ValidID(id) {
		return provenance.Upload{}, beamledger.NotFound("upload")
	}
	u, err := scanUpload(db.pool.QueryRow(ctx, `SELECT `+uploadColumns+uploadFrom+` WHERE u.id = $1`, id))
	return u, mapError(err, "upload")
}

// errLeaseHeld is what a request meets when another one is writing the upload.
var errLeaseHeld = beamledger.Conflict("another request is writing this upload; retry after it ends (HEAD gives the offset)")

// LeaseUpload implements provenance.UploadStore. The lease's clock is the
// database's, shared by every server process; now only stamps the activity.
func (db *DB) LeaseUpload(ctx context.Context, id, token string, lease time.Duration, now time.Time) (provenance.Upload, error) {
	if !accounts.ValidID(id) {
		return provenance.Upload{}, beamledger.NotFound("upload")
	}
	u, err := scanUpload(db.pool.QueryRow(ctx, `
WITH taken AS (
    UPDATE uploads SET lease_token = $2, lease_until = clock_timestamp() + $3 * interval '1 millisecond', last_activity = $4
    WHERE id = $1 AND (lease_until IS NULL OR lease_until < clock_timestamp())
    RETURNING *)
SELECT `+uploadColumns+` FROM taken u JOIN data_files f ON f.id = u.data_file_id`, id, token, lease.Milliseconds(), now))
	if errors.Is(err, pgx.ErrNoRows) {
		if _, err := db.Upload(ctx, id); err != nil {
			return u, err
		}
		return u, errLeaseHeld
	}
	return u, mapError(err, "upload")
}

// RenewUpload implements provenance.UploadStore.
func (db *DB) RenewUpload(ctx context.Context, id, token string, lease time.Duration, now time.Time) error {
	tag, err := db.pool.Exec(ctx, `UPDATE uploads SET lease_until = clock_timestamp() + $3 * interval '1 millisecond', last_activity = $4
WHERE id = $1 AND lease_token = $2`, id, token, lease.Milliseconds(), now)
	if err != nil {
		return mapError(err, "upload")
	}
	if tag.RowsAffected() == 0 {
		return errLeaseHeld
	}
	return nil
}

// DeclareUploadDigest implements provenance.UploadStore. A digest declared before
// is kept: the caller has compared the two already.
func (db *DB) DeclareUploadDigest(ctx context.Context, id, token, sha256Hex string) error {
	d, err := hex.DecodeString(sha256Hex)
	if err != nil || len(d) != 32 {
		return beamledger.InvalidField("Repr-Digest", "must be a sha-256 digest")
	}
	tag, err := db.pool.Exec(ctx, `UPDATE uploads SET declared_sha256 = coalesce(declared_sha256, $3) WHERE id = $1 AND lease_token = $2`, id, token, d)
	if err != nil {
		return mapError(err, "upload")
	}
	if tag.RowsAffected() == 0 {
		return errLeaseHeld
	}
	return nil
}

// SaveUploadProgress implements provenance.UploadStore.
func (db *DB) SaveUploadProgress(ctx context.Context, id, token string, p provenance.UploadProgress, lease time.Duration, now time.Time) error {
	parts, segments := p.Parts, p.Segments
	if parts == nil {
		parts = []provenance.UploadPart{}
	}
	if segments == nil {
		segments = []provenance.UploadSegment{}
	}
	tag, err := db.pool.Exec(ctx, `
UPDATE uploads SET upload_offset = $3, parts = $4, segments = $5, hash_state = $6,
    lease_until = clock_timestamp() + $7 * interval '1 millisecond', last_activity = $8
WHERE id = $1 AND lease_token = $2`, id, token, p.OffsetBytes, parts, segments, p.HashState, lease.Milliseconds(), now)
	if err != nil {
		return mapError(err, "upload")
	}
	if tag.RowsAffected() == 0 {
		return errLeaseHeld
	}
	return nil
}

// ReleaseUpload implements provenance.UploadStore.
func (db *DB) ReleaseUpload(ctx context.Context, id, token string) error {
	_, err := db.pool.Exec(ctx, `UPDATE uploads SET lease_token = NULL, lease_until = NULL WHERE id = $1 AND lease_token = $2`, id, token)
	return mapError(err, "upload")
}

// FinishUpload implements provenance.UploadStore. The existing record is looked
// for first; a unique violation means another upload of the same bytes stored its
// record between the look and the update, and the retry finds it.
func (db *DB) FinishUpload(ctx context.Context, id string, n provenance.NewDataFile, now time.Time) (provenance.DataFile, bool, error) {
	digest, err := hex.DecodeString(n.SHA256)
	if err != nil || len(digest) != 32 {
		return provenance.DataFile{}, false, beamledger.InvalidField("sha256", "must be 64 hex digits")
	}
	var f provenance.DataFile
	var created bool
	for attempt := 0; attempt < 3; attempt++ {
		err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
			var fileID string
			if err := tx.QueryRow(ctx, `DELETE FROM uploads WHERE id = $1 RETURNING data_file_id::text`, id).Scan(&fileID); err != nil {
				return err
			}
			existing, err := scanFile(tx.QueryRow(ctx, `SELECT `+fileColumns+` FROM data_files f, data_files p
WHERE p.id = $1 AND f.status = 'stored' AND f.sha256 = $2 AND f.project_id = p.project_id
  AND f.acquisition_id IS NOT DISTINCT FROM p.acquisition_id`, fileID, digest))
			if err == nil {
				f, created = existing, false
				_, err = tx.Exec(ctx, `DELETE FROM data_files WHERE id = $1`, fileID)
				return err
			}
			if !errors.Is(err, pgx.ErrNoRows) {
				return err
			}
			f, err = scanFile(tx.QueryRow(ctx, `
UPDATE data_files f SET status = 'stored', sha256 = $2, size_bytes = $3, media_type = $4, object_key = $5, stored_at = $6
WHERE f.id = $1 RETURNING `+fileColumns, fileID, digest, n.SizeBytes, n.MediaType, provenance.ObjectKey(n.SHA256), now))
			if err != nil {
				return err
			}
			created = true
			// Stored is when the file enters the ledger, as RecordFile's are.
			return appendChange(ctx, tx, f.UploadedBy, provenance.ActionCreate, provenance.EntityDataFile, f.ID, now, f)
		})
		if !isUniqueViolation(err) {
			break
		}
	}
	return f, created, mapError(err, "upload")
}

func isUniqueViolation(err error) bool {
	var pgErr *pgconn.PgError
	return errors.As(err, &pgErr) && pgErr.Code == uniqueViolation
}

// DeleteUpload implements provenance.UploadStore.
func (db *DB) DeleteUpload(ctx context.Context, id string) error {
	if !accounts.ValidID(id) {
		return beamledger.NotFound("upload")
	}
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var fileID string
		if err := tx.QueryRow(ctx, `DELETE FROM uploads WHERE id = $1 RETURNING data_file_id`, id).Scan(&fileID); err != nil {
			return err
		}
		_, err := tx.Exec(ctx, `DELETE FROM data_files WHERE id = $1 AND status = 'pending'`, fileID)
		return err
	})
	return mapError(err, "upload")
}

// ClaimExpiredUploads implements provenance.UploadStore. Rows another process is
// claiming are skipped, so several processes may sweep at once.
func (db *DB) ClaimExpiredUploads(ctx context.Context, idleBefore time.Time, limit int) ([]provenance.Upload, error) {
	var out []provenance.Upload
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		rows, err := tx.Query(ctx, `SELECT `+uploadColumns+uploadFrom+`
WHERE u.last_activity < $1 AND (u.lease_until IS NULL OR u.lease_until < clock_timestamp())
ORDER BY u.last_activity LIMIT $2 FOR UPDATE OF u SKIP LOCKED`, idleBefore, limit)
		if err != nil {
			return err
		}
		out, err = pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Upload, error) { return scanUpload(r) })
		if err != nil || len(out) == 0 {
			return err
		}
		ids := make([]string, len(out))
		files := make([]string, len(out))
		for i, u := range out {
			ids[i], files[i] = u.ID, u.DataFileID
		}
		if _, err := tx.Exec(ctx, `DELETE FROM uploads WHERE id = ANY($1::uuid[])`, ids); err != nil {
			return err
		}
		_, err = tx.Exec(ctx, `DELETE FROM data_files WHERE id = ANY($1::uuid[]) AND status = 'pending'`, files)
		return err
	})
	return out, mapError(err, "upload")
}

// UploadIDs implements provenance.UploadStore.
func (db *DB) UploadIDs(ctx context.Context, ids []string) (map[string]bool, error) {
	valid := make([]string, 0, len(ids))
	for _, id := range ids {
		if accounts.ValidID(id) {
			valid = append(valid, id)
		}
	}
	rows, err := db.pool.Query(ctx, `SELECT id::text FROM uploads WHERE id = ANY($1::uuid[])`, valid)
	if err != nil {
		return nil, mapError(err, "upload")
	}
	found, err := pgx.CollectRows(rows, pgx.RowTo[string])
	out := make(map[string]bool, len(found))
	for _, id := range found {
		out[id] = true
	}
	return out, mapError(err, "upload")
}

// UploadMultipartIDs implements provenance.UploadStore.
func (db *DB) UploadMultipartIDs(ctx context.Context) (map[string]bool, error) {
	rows, err := db.pool.Query(ctx, `SELECT multipart_id FROM uploads WHERE multipart_id <> ''`)
	if err != nil {
		return nil, mapError(err, "upload")
	}
	found, err := pgx.CollectRows(rows, pgx.RowTo[string])
	out := make(map[string]bool, len(found))
	for _, id := range found {
		out[id] = true
	}
	return out, mapError(err, "upload")
}

// TryExclusive runs fn only when no other process holds the named session advisory
// lock, and reports whether it ran. The lock is held on one pooled connection for
// fn's duration, so a process that dies frees it with its connection.
func (db *DB) TryExclusive(ctx context.Context, lockKey int64, fn func(context.Context) error) (bool, error) {
	conn, err := db.pool.Acquire(ctx)
	if err != nil {
		return false, mapError(err, "lock")
	}
	defer conn.Release()
	var got bool
	if err := conn.QueryRow(ctx, `SELECT pg_try_advisory_lock($1)`, lockKey).Scan(&got); err != nil {
		return false, mapError(err, "lock")
	}
	if !got {
		return false, nil
	}
	defer func() {
		if _, err := conn.Exec(context.WithoutCancel(ctx), `SELECT pg_advisory_unlock($1)`, lockKey); err != nil {
			// A lock that cannot be given back must not stay on a pooled connection.
			_ = conn.Conn().Close(context.Background())
		}
	}()
	return true, fn(ctx)
}
