package postgres

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
	"golang.org/x/mod/sumdb/tlog"

	"beamledger"
	"beamledger/provenance"
)

var _ provenance.LedgerStore = (*DB)(nil)

// appendEvent writes a ledger event in tx, the transaction of the change it records,
// so that the change and its event commit or vanish together. The event has no index
// yet: the sealer gives it one after it commits (see SealLedger), which is why
// writers never wait for one another here.
func appendEvent(ctx context.Context, tx pgx.Tx, ev provenance.LedgerEvent) error {
	_, err := appendEventSeq(ctx, tx, ev)
	return err
}

// appendEventSeq is appendEvent, returning the event's seq (for a row that names the
// event holding its content).
func appendEventSeq(ctx context.Context, tx pgx.Tx, ev provenance.LedgerEvent) (int64, error) {
	const q = `
INSERT INTO ledger_events (actor, at, action, entity_type, entity_id, leaf)
VALUES ($1, $2, $3, $4, $5, $6) RETURNING seq`
	var seq int64
	err := tx.QueryRow(ctx, q, ev.Actor, ev.At, ev.Action, ev.EntityType, ev.EntityID, ev.Leaf).Scan(&seq)
	return seq, err
}

// appendChange builds the event for a change (state is the entity's new state) and
// appends it in tx.
func appendChange(ctx context.Context, tx pgx.Tx, actor, action, entityType, entityID string, at time.Time, state any) error {
	ev, err := provenance.NewLedgerEvent(actor, action, entityType, entityID, at, state)
	if err != nil {
		return err
	}
	return appendEvent(ctx, tx, ev)
}

const eventColumns = `e.seq, e.idx, e.actor, e.at, e.action, e.entity_type, e.entity_id, e.leaf`

// scanEvent reads a row; State comes from the leaf, which is the record (a row whose
// leaf does not parse is reported, not hidden).
func scanEvent(row pgx.Row) (provenance.LedgerEvent, error) {
	var e provenance.LedgerEvent
	if err := row.Scan(&e.Seq, &e.Index, &e.Actor, &e.At, &e.Action, &e.EntityType, &e.EntityID, &e.Leaf); err != nil {
		return e, err
	}
	parsed, err := provenance.ParseLeaf(e.Leaf)
	if err != nil {
		return e, fmt.Errorf("ledger event %d: %w", e.Seq, err)
	}
	e.State = parsed.State
	e.At = e.At.UTC()
	return e, nil
}

// LedgerEvent implements provenance.LedgerStore.
func (db *DB) LedgerEvent(ctx context.Context, index int64) (provenance.LedgerEvent, error) {
	e, err := scanEvent(db.pool.QueryRow(ctx, `SELECT `+eventColumns+` FROM ledger_events e WHERE e.idx = $1`, index))
	return e, mapError(err, "ledger event")
}

// EventsFor implements provenance.LedgerStore. Sealed events come in ledger order,
// then unsealed ones in the order they were written.
func (db *DB) EventsFor(ctx context.Context, entityType, entityID string) ([]provenance.LedgerEvent, error) {
	const q = `SELECT ` + eventColumns + ` FROM ledger_events e WHERE e.entity_type = $1 AND e.entity_id = $2
ORDER BY e.idx NULLS LAST, e.seq`
	rows, err := db.pool.Query(ctx, q, entityType, entityID)
	if err != nil {
		return nil, mapError(err, "ledger event")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.LedgerEvent, error) { return scanEvent(r) })
	if out == nil {
		out = []provenance.LedgerEvent{}
	}
	return out, mapError(err, "ledger event")
}

// UnsealedEvents counts committed events not yet sealed and gives the time of the
// oldest (nil when none): how far sealing lags.
func (db *DB) UnsealedEvents(ctx context.Context) (int64, *time.Time, error) {
	var n int64
	var oldest *time.Time
	err := db.pool.QueryRow(ctx, `SELECT count(*), min(at) FROM ledger_events WHERE idx IS NULL`).Scan(&n, &oldest)
	return n, oldest, mapError(err, "ledger event")
}

// LedgerHead implements provenance.LedgerStore.
func (db *DB) LedgerHead(ctx context.Context) (provenance.TreeHead, error) {
	h, err := ledgerHead(ctx, db.pool)
	return h, mapError(err, "ledger tree")
}

func ledgerHead(ctx context.Context, q querier) (provenance.TreeHead, error) {
	var h provenance.TreeHead
	var root []byte
	err := q.QueryRow(ctx, `SELECT size, root, sealed_at FROM ledger_trees ORDER BY size DESC LIMIT 1`).Scan(&h.Size, &root, &h.SealedAt)
	if errors.Is(err, pgx.ErrNoRows) {
		return provenance.TreeHead{}, nil
	}
	copy(h.Root[:], root)
	h.SealedAt = h.SealedAt.UTC()
	return h, err
}

// hashReader reads stored hashes for tlog's proof and root functions. tlog's
// interface has no context, so the reader carries the caller's.
type hashReader struct {
	ctx context.Context
	q   querier
}

func (r hashReader) ReadHashes(indexes []int64) ([]tlog.Hash, error) {
	if len(indexes) == 0 {
		return nil, nil
	}
	rows, err := r.q.Query(r.ctx, `SELECT idx, hash FROM ledger_hashes WHERE idx = ANY($1)`, indexes)
	if err != nil {
		return nil, err
	}
	found := make(map[int64]tlog.Hash, len(indexes))
	var idx int64
	var h []byte
	_, err = pgx.ForEachRow(rows, []any{&idx, &h}, func() error {
		var x tlog.Hash
		copy(x[:], h)
		found[idx] = x
		return nil
	})
	if err != nil {
		return nil, err
	}
	out := make([]tlog.Hash, len(indexes))
	for k, i := range indexes {
		x, ok := found[i]
		if !ok {
			return nil, fmt.Errorf("ledger: stored hash %d is missing", i)
		}
		out[k] = x
	}
	return out, nil
}

// InclusionProof implements provenance.LedgerStore.
func (db *DB) InclusionProof(ctx context.Context, index, size int64) (provenance.InclusionProof, error) {
	p := provenance.InclusionProof{Index: index, Size: size}
	if err := db.checkSizes(ctx, index+1, size, "index", "size", 0); err != nil {
		return p, err
	}
	r := hashReader{ctx, db.pool}
	leaf, err := r.ReadHashes([]int64{tlog.StoredHashIndex(0, index)})
	if err != nil {
		return p, err
	}
	p.LeafHash = leaf[0]
	if p.Root, err = tlog.TreeHash(size, r); err != nil {
		return p, err
	}
	p.Proof, err = tlog.ProveRecord(size, index, r)
	return p, err
}

// ConsistencyProof implements provenance.LedgerStore.
func (db *DB) ConsistencyProof(ctx context.Context, from, to int64) (provenance.ConsistencyProof, error) {
	p := provenance.ConsistencyProof{From: from, To: to}
	if err := db.checkSizes(ctx, from, to, "from", "to", 1); err != nil {
		return p, err
	}
	r := hashReader{ctx, db.pool}
	var err error
	if p.FromRoot, err = tlog.TreeHash(from, r); err != nil {
		return p, err
	}
	if p.ToRoot, err = tlog.TreeHash(to, r); err != nil {
		return p, err
	}
	p.Proof, err = tlog.ProveTree(to, from, r)
	return p, err
}

// checkSizes refuses unless 0 < low ≤ high ≤ the sealed size. The names are the
// caller's parameters and lowMin what the caller's own low parameter must reach
// (index 0 is low 1), for the messages.
func (db *DB) checkSizes(ctx context.Context, low, high int64, lowName, highName string, lowMin int64) error {
	head, err := db.LedgerHead(ctx)
	if err != nil {
		return err
	}
	switch {
	case low < 1:
		return beamledger.InvalidField(lowName, fmt.Sprintf("must be at least %d", lowMin))
	case low > high:
		return beamledger.InvalidField(lowName, "lies past "+highName)
	case high > head.Size:
		return beamledger.InvalidField(highName, fmt.Sprintf("must be at most the sealed size, %d", head.Size))
	}
	return nil
}

const checkpointColumns = `origin, size, root, note, signed_at`

func scanCheckpoint(row pgx.Row) (provenance.Checkpoint, error) {
	var c provenance.Checkpoint
	var root []byte
	err := row.Scan(&c.Origin, &c.Size, &root, &c.Note, &c.SignedAt)
	copy(c.Root[:], root)
	c.SignedAt = c.SignedAt.UTC()
	return c, err
}

// LatestCheckpoint implements provenance.LedgerStore.
func (db *DB) LatestCheckpoint(ctx context.Context) (provenance.Checkpoint, error) {
	c, err := scanCheckpoint(db.pool.QueryRow(ctx, `SELECT `+checkpointColumns+` FROM ledger_checkpoints ORDER BY size DESC LIMIT 1`))
	return c, mapError(err, "checkpoint")
}

// Checkpoint implements provenance.LedgerStore.
func (db *DB) Checkpoint(ctx context.Context, size int64) (provenance.Checkpoint, error) {
	c, err := scanCheckpoint(db.pool.QueryRow(ctx, `SELECT `+checkpointColumns+` FROM ledger_checkpoints WHERE size = $1`, size))
	return c, mapError(err, "checkpoint")
}

// Checkpoints implements provenance.LedgerStore.
func (db *DB) Checkpoints(ctx context.Context, after int64, limit int) ([]provenance.Checkpoint, error) {
	if limit < 1 || limit > 1000 {
		limit = 1000
	}
	rows, err := db.pool.Query(ctx, `SELECT `+checkpointColumns+` FROM ledger_checkpoints WHERE size > $1 ORDER BY size LIMIT $2`, after, limit)
	if err != nil {
		return nil, mapError(err, "checkpoint")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Checkpoint, error) { return scanCheckpoint(r) })
	if out == nil {
		out = []provenance.Checkpoint{}
	}
	return out, mapError(err, "checkpoint")
}
