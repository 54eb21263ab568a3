package postgres

import (
	"context"
	"fmt"
	"iter"
	"regexp"
	"strconv"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
	"golang.org/x/mod/sumdb/note"

	"beamledger/provenance"
)

// auditFetch is how many rows each cursor fetches at a time, and how many rows a
// stream reads ahead: the audit's memory is a few batches per table, whatever the
// ledger's length.
const auditFetch = 1000

// auditConns is how many connections an audit holds: one for the snapshot, the
// tree heads and the checkpoints, and one for each of the two long streams.
const auditConns = 3

// snapshotID is the form of an exported snapshot's name, checked before it is
// written into SET TRANSACTION SNAPSHOT (which takes no parameters).
var snapshotID = regexp.MustCompile(`^[0-9A-Fa-f-]+$`)

// AuditLedger recomputes the ledger's whole tree from its event rows and checks every
// stored hash, tree head and checkpoint (each signature with the one of keys it
// names: several keys check a ledger across a key rotation), as
// provenance.AuditLedger describes. Everything is read in one REPEATABLE READ
// snapshot, so a seal committing meanwhile is not half seen: the first transaction
// exports it, and the events and the stored hashes are streamed by two more
// transactions that import it, each on its own connection, so the database reads
// both tables while the audit hashes. Tree heads and checkpoints come through
// cursors in the first. Memory does not grow with the ledger. The error is for a
// database that could not be read; what is wrong with the ledger is in the report's
// Fault.
func (db *DB) AuditLedger(ctx context.Context, keys ...note.Verifier) (provenance.LedgerReport, error) {
	var rep provenance.LedgerReport
	if db.pool.Config().MaxConns < auditConns {
		return rep, fmt.Errorf("ledger audit: needs a pool of %d connections, not %d", auditConns, db.pool.Config().MaxConns)
	}
	tx, err := db.pool.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		return rep, mapError(err, "ledger")
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	var snapshot string
	if err := tx.QueryRow(ctx, `SELECT pg_export_snapshot()`).Scan(&snapshot); err != nil {
		return rep, mapError(err, "ledger")
	}
	if !snapshotID.MatchString(snapshot) {
		return rep, fmt.Errorf("ledger audit: unexpected snapshot name %q", snapshot)
	}
	cursors := []string{
		`DECLARE audit_trees NO SCROLL CURSOR FOR SELECT size, root, sealed_at FROM ledger_trees ORDER BY size`,
		`DECLARE audit_checkpoints NO SCROLL CURSOR FOR SELECT ` + checkpointColumns + ` FROM ledger_checkpoints ORDER BY size`,
	}
	for _, c := range cursors {
		if _, err := tx.Exec(ctx, c); err != nil {
			return rep, mapError(err, "ledger")
		}
	}
	src := provenance.LedgerSource{
		Events: snapshotStream(ctx, db.pool, snapshot, `SELECT `+eventColumns+` FROM ledger_events e WHERE e.idx IS NOT NULL ORDER BY e.idx`,
			func(r pgx.CollectableRow) (provenance.LedgerEvent, error) {
				var e provenance.LedgerEvent
				err := r.Scan(&e.Seq, &e.Index, &e.Actor, &e.At, &e.Action, &e.EntityType, &e.EntityID, &e.Leaf)
				return e, err
			}),
		Hashes: snapshotStream(ctx, db.pool, snapshot, `SELECT idx, hash FROM ledger_hashes ORDER BY idx`,
			func(r pgx.CollectableRow) (provenance.StoredHash, error) {
				var h provenance.StoredHash
				var b []byte
				err := r.Scan(&h.Index, &b)
				if len(b) != len(h.Hash) {
					// A hash of the wrong length cannot match; zeros make it fail the compare.
					b = nil
				}
				copy(h.Hash[:], b)
				return h, err
			}),
		Heads: fetchAll(ctx, tx, "audit_trees", func(r pgx.CollectableRow) (provenance.TreeHead, error) {
			var h provenance.TreeHead
			var root []byte
			err := r.Scan(&h.Size, &root, &h.SealedAt)
			copy(h.Root[:], root)
			return h, err
		}),
		Checkpoints: fetchAll(ctx, tx, "audit_checkpoints", func(r pgx.CollectableRow) (provenance.Checkpoint, error) {
			return scanCheckpoint(r)
		}),
	}
	rep, err = provenance.AuditLedger(src, keys...)
	return rep, mapError(err, "ledger")
}

// snapshotStream yields the rows of query, run in a read-only transaction of its
// own that imports the exported snapshot. A goroutine reads the rows in batches of
// auditFetch, at most two batches ahead of the consumer, so the database produces
// rows while the consumer works on the ones before. Stopping early cancels it.
func snapshotStream[T any](ctx context.Context, pool *pgxpool.Pool, snapshot, query string, scan func(pgx.CollectableRow) (T, error)) iter.Seq2[T, error] {
	return func(yield func(T, error) bool) {
		ctx, cancel := context.WithCancel(ctx)
		defer cancel()
		batches := make(chan []T, 2)
		errc := make(chan error, 1)
		go func() {
			defer close(batches)
			errc <- func() error {
				tx, err := pool.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
				if err != nil {
					return err
				}
				defer tx.Rollback(context.WithoutCancel(ctx))
				if _, err := tx.Exec(ctx, `SET TRANSACTION SNAPSHOT '`+snapshot+`'`); err != nil {
					return err
				}
				rows, err := tx.Query(ctx, query)
				if err != nil {
					return err
				}
				defer rows.Close()
				batch := make([]T, 0, auditFetch)
				for rows.Next() {
					v, err := scan(rows)
					if err != nil {
						return err
					}
					if batch = append(batch, v); len(batch) == auditFetch {
						select {
						case batches <- batch:
						case <-ctx.Done():
							return ctx.Err()
						}
						batch = make([]T, 0, auditFetch)
					}
				}
				if err := rows.Err(); err != nil {
					return err
				}
				if len(batch) > 0 {
					select {
					case batches <- batch:
					case <-ctx.Done():
						return ctx.Err()
					}
				}
				return nil
			}()
		}()
		for batch := range batches {
			for _, v := range batch {
				if !yield(v, nil) {
					return
				}
			}
		}
		if err := <-errc; err != nil {
			var zero T
			yield(zero, err)
		}
	}
}

// fetchAll yields every row of an open cursor, auditFetch rows per round trip. The
// rows of one fetch are read into memory before the first is yielded, so the
// connection is free for the other cursors' fetches in between.
func fetchAll[T any](ctx context.Context, tx pgx.Tx, cursor string, scan func(pgx.CollectableRow) (T, error)) iter.Seq2[T, error] {
	fetch := `FETCH FORWARD ` + strconv.Itoa(auditFetch) + ` FROM ` + pgx.Identifier{cursor}.Sanitize()
	return func(yield func(T, error) bool) {
		for {
			rows, err := tx.Query(ctx, fetch)
			if err != nil {
				var zero T
				yield(zero, err)
				return
			}
			batch, err := pgx.CollectRows(rows, scan)
			if err != nil {
				var zero T
				yield(zero, err)
				return
			}
			for _, v := range batch {
				if !yield(v, nil) {
					return
				}
			}
			if len(batch) < auditFetch {
				return
			}
		}
	}
}
