package postgres

import (
	"context"
	"fmt"
	"iter"
	"regexp"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"
	"github.com/jackc/pgx/v5/pgxpool"
	"golang.org/x/mod/sumdb/note"

	"beamledger/provenance"
)

// auditFetch is how many rows each cursor fetches at a time, and how many rows a
// stream reads ahead: the audit's memory is a few batches per table, whatever the
// ledger's length.
const auditFetch = 4096

// auditConns is how many connections an audit holds: one for the snapshot, the
// tree heads and the checkpoints, and one for each of the two long streams.
const auditConns = 3

// snapshotID is the form of an exported snapshot's name, checked before it is
// written into SET TRANSACTION SNAPSHOT (which takes no parameters).
var snapshotID = regexp.MustCompile(`^[0-9A-Fa-f-]+$`)

// beginOnSnapshot begins on conn a read-only REPEATABLE READ transaction that sees the
// exported snapshot.
func beginOnSnapshot(ctx context.Context, conn *pgxpool.Conn, snapshot string) (pgx.Tx, error) {
	if !snapshotID.MatchString(snapshot) {
		return nil, fmt.Errorf("unexpected snapshot name %q", snapshot)
	}
	tx, err := conn.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly})
	if err != nil {
		return nil, err
	}
	if _, err := tx.Exec(ctx, `SET TRANSACTION SNAPSHOT '`+snapshot+`'`); err != nil {
		_ = tx.Rollback(context.WithoutCancel(ctx))
		return nil, err
	}
	return tx, nil
}

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
			new(eventScanner).scan),
		Hashes: snapshotStream(ctx, db.pool, snapshot, `SELECT idx, hash FROM ledger_hashes ORDER BY idx`,
			new(hashScanner).scan),
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

// eventScanner reads event rows for the audit without an allocation per column:
// the leaves are copied into shared blocks, the indexes into a
// shared array, and the few distinct actors, actions and entity types are kept
// once each. Nothing a scanned event holds is written again, so events may be
// handed to another goroutine.
type eventScanner struct {
	block   []byte  // where the next bytes go
	indexes []int64 // where the next index goes
	names   map[string]string
	// row and dest are where Scan writes: fields of a long-lived value, so that
	// passing their addresses allocates nothing.
	row struct {
		seq                                       int64
		index                                     pgtype.Int8
		at                                        time.Time
		actor, action, entityType, entityID, leaf pgtype.DriverBytes
	}
	dest []any
}

// eventBlock is the size of the blocks leaves are copied into.
const eventBlock = 1 << 20

func (s *eventScanner) scan(r pgx.CollectableRow) (provenance.LedgerEvent, error) {
	w := &s.row
	if s.dest == nil {
		s.dest = []any{&w.seq, &w.index, &w.actor, &w.at, &w.action, &w.entityType, &w.entityID, &w.leaf}
	}
	if err := r.Scan(s.dest...); err != nil {
		return provenance.LedgerEvent{}, err
	}
	e := provenance.LedgerEvent{Seq: w.seq, At: w.at}
	if index := w.index; index.Valid {
		if len(s.indexes) == 0 {
			s.indexes = make([]int64, auditFetch)
		}
		s.indexes[0] = index.Int64
		e.Index, s.indexes = &s.indexes[0], s.indexes[1:]
	}
	e.Actor, e.Action, e.EntityType = s.name(w.actor), s.name(w.action), s.name(w.entityType)
	e.EntityID = string(w.entityID)
	e.Leaf = s.copy(w.leaf)
	return e, nil
}

// hashScanner reads stored-hash rows for the audit, allocating nothing per row.
type hashScanner struct {
	index int64
	hash  pgtype.DriverBytes
	dest  []any
}

func (s *hashScanner) scan(r pgx.CollectableRow) (provenance.StoredHash, error) {
	if s.dest == nil {
		s.dest = []any{&s.index, &s.hash}
	}
	var h provenance.StoredHash
	if err := r.Scan(s.dest...); err != nil {
		return h, err
	}
	h.Index = s.index
	// A hash of the wrong length cannot match; zeros make it fail the compare.
	if len(s.hash) == len(h.Hash) {
		copy(h.Hash[:], s.hash)
	}
	return h, nil
}

// copy keeps b in the current block, starting a new one when it is full (a leaf
// larger than a block gets one of its own).
func (s *eventScanner) copy(b []byte) []byte {
	if len(b) > cap(s.block)-len(s.block) {
		s.block = make([]byte, 0, max(eventBlock, len(b)))
	}
	start := len(s.block)
	s.block = append(s.block, b...)
	return s.block[start:len(s.block):len(s.block)]
}

// name returns b as a string, the same string for the same bytes.
func (s *eventScanner) name(b []byte) string {
	if v, ok := s.names[string(b)]; ok {
		return v
	}
	if s.names == nil {
		s.names = map[string]string{}
	}
	v := string(b)
	if len(s.names) < 4096 { // a ledger's actors and kinds; beyond, just copy
		s.names[v] = v
	}
	return v
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
				conn, err := pool.Acquire(ctx)
				if err != nil {
					return err
				}
				defer conn.Release()
				tx, err := beginOnSnapshot(ctx, conn, snapshot)
				if err != nil {
					return err
				}
				defer tx.Rollback(context.WithoutCancel(ctx))
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
