package postgres

import (
	"context"
	"encoding/hex"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/provenance"
)

// ScrubSelection says which stored objects a scrub reads.
type ScrubSelection struct {
	// NotCheckedSince, when set, keeps objects whose last check is older (or absent).
	NotCheckedSince *time.Time
	// Sample, when above zero, reads that many objects chosen at random.
	Sample int
}

// StoredObjects calls fn for each distinct object that stored records point to, as
// the selection says, streaming rows so that millions of objects need no memory.
func (db *DB) StoredObjects(ctx context.Context, sel ScrubSelection, fn func(provenance.StoredObject) error) error {
	var w filter
	w.where("f.status = 'stored'")
	if sel.NotCheckedSince != nil {
		w.where("(c.checked_at IS NULL OR c.checked_at < " + w.arg(*sel.NotCheckedSince) + ")")
	}
	q := `SELECT DISTINCT ON (f.sha256) encode(f.sha256, 'hex'), f.object_key, f.size_bytes
FROM data_files f LEFT JOIN object_checks c ON c.sha256 = f.sha256` + w.sql() + ` ORDER BY f.sha256`
	if sel.Sample > 0 {
		q = `SELECT * FROM (` + q + `) o ORDER BY random() LIMIT ` + w.arg(sel.Sample)
	}
	rows, err := db.pool.Query(ctx, q, w.args...)
	if err != nil {
		return mapError(err, "data file")
	}
	defer rows.Close()
	var o provenance.StoredObject
	_, err = pgx.ForEachRow(rows, []any{&o.SHA256, &o.Key, &o.SizeBytes}, func() error { return fn(o) })
	return mapError(err, "data file")
}

// RecordObjectCheck keeps the outcome of reading one object back.
func (db *DB) RecordObjectCheck(ctx context.Context, sha256Hex string, outcome provenance.ScrubOutcome, detail string, at time.Time) error {
	digest, err := hex.DecodeString(sha256Hex)
	if err != nil {
		return err
	}
	if len(detail) > 1000 {
		detail = detail[:1000]
	}
	const q = `
INSERT INTO object_checks (sha256, checked_at, outcome, detail) VALUES ($1, $2, $3, $4)
ON CONFLICT (sha256) DO UPDATE SET checked_at = excluded.checked_at, outcome = excluded.outcome, detail = excluded.detail`
	_, err = db.pool.Exec(ctx, q, digest, at, string(outcome), detail)
	return mapError(err, "object check")
}

// RecordedDigests returns which of the given SHA-256s (hex) some stored record names.
func (db *DB) RecordedDigests(ctx context.Context, digests []string) (map[string]bool, error) {
	raw := make([][]byte, 0, len(digests))
	for _, d := range digests {
		if b, err := hex.DecodeString(d); err == nil && len(b) == 32 {
			raw = append(raw, b)
		}
	}
	rows, err := db.pool.Query(ctx, `SELECT DISTINCT encode(sha256, 'hex') FROM data_files WHERE status = 'stored' AND sha256 = ANY($1)`, raw)
	if err != nil {
		return nil, mapError(err, "data file")
	}
	known, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return nil, mapError(err, "data file")
	}
	out := make(map[string]bool, len(known))
	for _, k := range known {
		out[k] = true
	}
	return out, nil
}

// StoredObjectsTotal counts the objects and bytes StoredObjects would read, for
// progress reports.
func (db *DB) StoredObjectsTotal(ctx context.Context, sel ScrubSelection) (objects int, bytes int64, err error) {
	var w filter
	w.where("f.status = 'stored'")
	if sel.NotCheckedSince != nil {
		w.where("(c.checked_at IS NULL OR c.checked_at < " + w.arg(*sel.NotCheckedSince) + ")")
	}
	q := `SELECT count(*), coalesce(sum(size_bytes), 0)::bigint FROM (SELECT DISTINCT ON (f.sha256) f.size_bytes
FROM data_files f LEFT JOIN object_checks c ON c.sha256 = f.sha256` + w.sql() + ` ORDER BY f.sha256) o`
	err = db.pool.QueryRow(ctx, q, w.args...).Scan(&objects, &bytes)
	if sel.Sample > 0 && objects > sel.Sample {
		bytes = bytes / int64(objects) * int64(sel.Sample) // an estimate: the sample is random
		objects = sel.Sample
	}
	return objects, bytes, mapError(err, "data file")
}
