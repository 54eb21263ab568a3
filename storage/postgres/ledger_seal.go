package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"
	"golang.org/x/mod/sumdb/tlog"

	"beamledger"
	"beamledger/provenance"
)

// ledgerSealLock is the advisory lock key that makes one sealer at a time, across
// every process on the database: "blseal" in ASCII, a constant no other lock uses.
const ledgerSealLock int64 = 0x62_6c_73_65_61_6c

// sealBatch bounds the events one seal transaction takes, so a backlog (a sealer
// that was down) is sealed in steps of bounded memory and lock time.
const sealBatch = 4096

// SealLedger gives every committed unsealed event its index in the tree, stores the
// tree's new stored hashes, records the new size and root and, when signer is not
// nil, a signed checkpoint of them: each batch in one transaction under a
// transaction-scoped advisory lock, so sealers in several processes take turns and
// each starts from the tree the previous one committed. Events are taken in the
// order they were written (seq); one written by a transaction still open is simply
// sealed by a later call, so indexes stay contiguous whatever order writers commit
// in. It returns the tree after the last batch; now stamps the seal and checkpoint.
func (db *DB) SealLedger(ctx context.Context, signer *provenance.CheckpointSigner, now time.Time) (provenance.TreeHead, error) {
	for {
		head, sealed, err := db.sealBatch(ctx, signer, now)
		if err != nil || sealed < sealBatch {
			return head, mapError(err, "ledger")
		}
	}
}

func (db *DB) sealBatch(ctx context.Context, signer *provenance.CheckpointSigner, now time.Time) (provenance.TreeHead, int, error) {
	var head provenance.TreeHead
	var sealed int
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock($1)`, ledgerSealLock); err != nil {
			return err
		}
		// Read after taking the lock: under READ COMMITTED each statement sees every
		// transaction committed before it began, the previous sealer's included.
		var err error
		if head, err = ledgerHead(ctx, tx); err != nil {
			return err
		}
		seqs, leaves, err := unsealedEvents(ctx, tx)
		if err != nil || len(seqs) == 0 {
			return err
		}
		b, err := provenance.ResumeTreeBuilder(head.Size, hashReader{ctx, tx})
		if err != nil {
			return err
		}
		idxs := make([]int64, len(seqs))
		var hashIdx []int64
		var hashes [][]byte
		for k, leaf := range leaves {
			idxs[k] = b.Size()
			hs, err := b.Append(leaf)
			if err != nil {
				return err
			}
			first := tlog.StoredHashIndex(0, idxs[k])
			for j, h := range hs {
				hashIdx = append(hashIdx, first+int64(j))
				hashes = append(hashes, h[:])
			}
		}
		root, err := b.Root()
		if err != nil {
			return err
		}
		head = provenance.TreeHead{Size: b.Size(), Root: root, SealedAt: now.UTC()}
		if err := storeSeal(ctx, tx, seqs, idxs, hashIdx, hashes, head); err != nil {
			return err
		}
		sealed = len(seqs)
		if signer == nil {
			return nil
		}
		cp, err := signer.Sign(head.Size, head.Root, now)
		if err != nil {
			return err
		}
		return insertCheckpoint(ctx, tx, cp)
	})
	return head, sealed, err
}

// unsealedEvents reads up to sealBatch committed unsealed events in the order they
// were written.
func unsealedEvents(ctx context.Context, tx pgx.Tx) ([]int64, [][]byte, error) {
	rows, err := tx.Query(ctx, `SELECT seq, leaf FROM ledger_events WHERE idx IS NULL ORDER BY seq LIMIT $1`, sealBatch)
	if err != nil {
		return nil, nil, err
	}
	var seqs []int64
	var leaves [][]byte
	var seq int64
	var leaf []byte
	_, err = pgx.ForEachRow(rows, []any{&seq, &leaf}, func() error {
		seqs = append(seqs, seq)
		leaves = append(leaves, append([]byte(nil), leaf...))
		return nil
	})
	return seqs, leaves, err
}

// storeSeal writes one seal: the events' indexes, the new stored hashes and the new
// tree head. The unique index on idx and the primary keys on the hash index and the
// size make a second sealer that somehow skipped the lock fail instead of forking.
func storeSeal(ctx context.Context, tx pgx.Tx, seqs, idxs, hashIdx []int64, hashes [][]byte, head provenance.TreeHead) error {
	tag, err := tx.Exec(ctx, `
UPDATE ledger_events e SET idx = v.idx FROM unnest($1::bigint[], $2::bigint[]) AS v(seq, idx)
WHERE e.seq = v.seq AND e.idx IS NULL`, seqs, idxs)
	if err != nil {
		return err
	}
	if tag.RowsAffected() != int64(len(seqs)) {
		return beamledger.Unavailable("the ledger changed while it was being sealed; try again")
	}
	if _, err := tx.Exec(ctx, `INSERT INTO ledger_hashes (idx, hash) SELECT * FROM unnest($1::bigint[], $2::bytea[])`, hashIdx, hashes); err != nil {
		return err
	}
	_, err = tx.Exec(ctx, `INSERT INTO ledger_trees (size, root, sealed_at) VALUES ($1, $2, $3)`, head.Size, head.Root[:], head.SealedAt)
	return err
}

func insertCheckpoint(ctx context.Context, tx pgx.Tx, cp provenance.Checkpoint) error {
	_, err := tx.Exec(ctx, `
INSERT INTO ledger_checkpoints (size, origin, root, note, signed_at) VALUES ($1, $2, $3, $4, $5)
ON CONFLICT (size) DO NOTHING`, cp.Size, cp.Origin, cp.Root[:], cp.Note, cp.SignedAt)
	return err
}

// SignCheckpoint seals what is committed and returns the checkpoint of the tree
// that results, signing one when the seals made none (a tree sealed without a
// signer, or by a process with another key, keeps the checkpoint it has).
// ErrConflict while the ledger is empty: there is no tree to sign.
func (db *DB) SignCheckpoint(ctx context.Context, signer *provenance.CheckpointSigner, now time.Time) (provenance.Checkpoint, error) {
	head, err := db.SealLedger(ctx, signer, now)
	if err != nil {
		return provenance.Checkpoint{}, err
	}
	if head.Size == 0 {
		return provenance.Checkpoint{}, beamledger.Conflict("the ledger has no sealed events yet: there is nothing to sign")
	}
	cp, err := signer.Sign(head.Size, head.Root, now)
	if err != nil {
		return cp, err
	}
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error { return insertCheckpoint(ctx, tx, cp) })
	if err != nil {
		return cp, mapError(err, "checkpoint")
	}
	return db.Checkpoint(ctx, head.Size)
}
