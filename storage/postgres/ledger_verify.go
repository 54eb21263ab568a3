package postgres

import (
	"context"
	"iter"
	"strconv"

	"github.com/jackc/pgx/v5"
	"golang.org/x/mod/sumdb/note"

	"beamledger/provenance"
)

// auditFetch is how many rows each cursor fetches at a time: the audit's memory is
// this many rows per table, whatever the ledger's length.
const auditFetch = 1000

// AuditLedger recomputes the ledger's whole tree from its event rows and checks every
// stored hash, tree head and checkpoint (signatures with v), as
// provenance.AuditLedger describes. Everything is read in one REPEATABLE READ
// snapshot through server-side cursors, so a seal committing meanwhile is not half
// seen and memory does not grow with the ledger. The error is for a database that
// could not be read; what is wrong with the ledger is in the report's Fault.
func (db *DB) AuditLedger(ctx context.Context, v note.Verifier) (provenance.LedgerReport, error) {
	var rep provenance.LedgerReport
	tx, err := db.pool.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		return rep, mapError(err, "ledger")
	}
	defer tx.Rollback(context.WithoutCancel(ctx))
	cursors := []string{
		`DECLARE audit_events NO SCROLL CURSOR FOR SELECT ` + eventColumns + ` FROM ledger_events e WHERE e.idx IS NOT NULL ORDER BY e.idx`,
		`DECLARE audit_hashes NO SCROLL CURSOR FOR SELECT idx, hash FROM ledger_hashes ORDER BY idx`,
		`DECLARE audit_trees NO SCROLL CURSOR FOR SELECT size, root, sealed_at FROM ledger_trees ORDER BY size`,
		`DECLARE audit_checkpoints NO SCROLL CURSOR FOR SELECT ` + checkpointColumns + ` FROM ledger_checkpoints ORDER BY size`,
	}
	for _, c := range cursors {
		if _, err := tx.Exec(ctx, c); err != nil {
			return rep, mapError(err, "ledger")
		}
	}
	src := provenance.LedgerSource{
		Events: fetchAll(ctx, tx, "audit_events", func(r pgx.CollectableRow) (provenance.LedgerEvent, error) {
			var e provenance.LedgerEvent
			err := r.Scan(&e.Seq, &e.Index, &e.Actor, &e.At, &e.Action, &e.EntityType, &e.EntityID, &e.Leaf)
			return e, err
		}),
		Hashes: fetchAll(ctx, tx, "audit_hashes", func(r pgx.CollectableRow) (provenance.StoredHash, error) {
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
	rep, err = provenance.AuditLedger(src, v)
	return rep, mapError(err, "ledger")
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
