package postgres

import (
	"context"
	"errors"
	"fmt"

	"github.com/jackc/pgx/v5"

	"beamledger/provenance"
)

// BackupSnapshot holds a read-only transaction open on an exported snapshot, so
// that a dump taken with it (pg_dump --snapshot) and the object list read from it
// describe the same instant.
type BackupSnapshot struct {
	tx pgx.Tx
	// Name is the exported snapshot's identifier, for pg_dump --snapshot.
	Name string
}

// WithBackupSnapshot exports a snapshot and calls fn with it; the snapshot stays
// valid until fn returns.
func (db *DB) WithBackupSnapshot(ctx context.Context, fn func(*BackupSnapshot) error) error {
	tx, err := db.pool.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		return mapError(err, "backup snapshot")
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	snap := &BackupSnapshot{tx: tx}
	if err := tx.QueryRow(ctx, `SELECT pg_export_snapshot()`).Scan(&snap.Name); err != nil {
		return mapError(err, "backup snapshot")
	}
	return fn(snap)
}

// StoredObjects calls fn for each distinct object that stored records point to in
// the snapshot, in digest order, streaming the rows.
func (s *BackupSnapshot) StoredObjects(ctx context.Context, fn func(provenance.StoredObject) error) error {
	return storedObjects(ctx, s.tx, fn)
}

// SchemaVersion is the newest migration applied in the snapshot.
func (s *BackupSnapshot) SchemaVersion(ctx context.Context) (int64, error) {
	var v int64
	err := s.tx.QueryRow(ctx, `SELECT coalesce(max(version_id), 0) FROM goose_db_version WHERE is_applied`).Scan(&v)
	return v, mapError(err, "schema version")
}

// AllStoredObjects is StoredObjects of the database as it is now, for checking a
// restored database against its backup's manifest.
func (db *DB) AllStoredObjects(ctx context.Context, fn func(provenance.StoredObject) error) error {
	return storedObjects(ctx, db.pool, fn)
}

func storedObjects(ctx context.Context, q querier, fn func(provenance.StoredObject) error) error {
	rows, err := q.Query(ctx, `SELECT DISTINCT ON (sha256) encode(sha256, 'hex'), object_key, size_bytes
FROM data_files WHERE status = 'stored' ORDER BY sha256`)
	if err != nil {
		return mapError(err, "data file")
	}
	defer rows.Close()
	var o provenance.StoredObject
	_, err = pgx.ForEachRow(rows, []any{&o.SHA256, &o.Key, &o.SizeBytes}, func() error { return fn(o) })
	return mapError(err, "data file")
}

// ErrNotEmpty is CheckEmpty's answer, wrapped with what was found, for a database that
// already holds tables.
var ErrNotEmpty = errors.New("the database is not empty")

// CheckEmpty returns an error wrapping ErrNotEmpty when the database holds any
// table, view or sequence outside the system schemas: a restore goes only into a
// fresh database, never over records.
func (db *DB) CheckEmpty(ctx context.Context) error {
	var n int
	var example string
	err := db.pool.QueryRow(ctx, `
SELECT count(*), coalesce(min(n.nspname || '.' || c.relname), '')
FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace
WHERE c.relkind IN ('r', 'p', 'v', 'm', 'S', 'f')
  AND n.nspname NOT IN ('pg_catalog', 'information_schema')
  AND n.nspname NOT LIKE 'pg\_toast%' AND n.nspname NOT LIKE 'pg\_temp%'`).Scan(&n, &example)
	if err != nil {
		return mapError(err, "database")
	}
	if n > 0 {
		return fmt.Errorf("%w: it holds %d relations (%s, ...)", ErrNotEmpty, n, example)
	}
	return nil
}

// DropRestored removes everything a refused restore wrote into the database it
// found empty: the public schema with its tables and extensions, recreated empty.
func (db *DB) DropRestored(ctx context.Context) error {
	return pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		_, err := tx.Exec(ctx, `DROP SCHEMA public CASCADE; CREATE SCHEMA public`)
		return err
	})
}
