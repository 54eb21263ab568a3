package server

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"time"

	"beamledger"
	"beamledger/provenance"
	"beamledger/storage/objects"
)

// errNoLedgerKey is Run's refusal: a server without the key would seal events but
// sign no checkpoint, and unsigned roots prove nothing to an auditor.
var errNoLedgerKey = errors.New("BEAMLEDGER_LEDGER_KEY: is missing; generate one with `openssl genpkey -algorithm ed25519` (not the JWT key)")

// newLedgerSigner makes the checkpoint signer from the configuration; nil without a
// key (tests that never serve), which seals without signing.
func newLedgerSigner(cfg Config) (*provenance.CheckpointSigner, error) {
	if len(cfg.LedgerKey) == 0 {
		return nil, nil
	}
	return provenance.NewCheckpointSigner(cfg.LedgerOrigin, cfg.LedgerKey)
}

// sealLedgerEvery seals committed ledger events every LedgerSealInterval until ctx
// ends. Every process runs it; storage makes the sealers take turns under an
// advisory lock, so more processes shorten the lag rather than fork the tree.
func (s *Server) sealLedgerEvery(ctx context.Context) {
	t := time.NewTicker(s.cfg.LedgerSealInterval)
	defer t.Stop()
	failing := false
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		_, err := s.sealLedger(ctx)
		switch {
		case err != nil && ctx.Err() == nil && !failing:
			// Logged once per outage, not twice a second.
			s.log.Warn("sealing the ledger failed; events stay unsealed until it works again", slog.Any("error", err))
			failing = true
		case err == nil && failing:
			s.log.Info("sealing the ledger works again")
			failing = false
		}
	}
}

// sealLedger seals what is committed now, signing a checkpoint if the tree grew,
// and publishes the newest checkpoint to the object store when configured.
func (s *Server) sealLedger(ctx context.Context) (provenance.TreeHead, error) {
	start := time.Now()
	head, err := s.store.SealLedger(ctx, s.ledger, s.now())
	s.jobDone(ctx, jobLedgerSeal, start, err)
	if err == nil {
		s.publishCheckpoint(ctx, head.Size)
	}
	return head, err
}

// checkpointKey is where the checkpoint of a tree of size events is published;
// the zero-padded size keeps a listing in order.
func checkpointKey(size int64) string {
	return fmt.Sprintf("ledger/checkpoints/%020d.note", size)
}

// publishCheckpoint writes the signed checkpoint of the tree of size events to the
// object store under compliance-mode retention, once: a size this process
// published already is skipped, and one another process published is found by
// Stat. Publishing is a copy: a failure is logged and retried with the next seal's
// checkpoint; the database keeps every checkpoint, and `ledger verify` checks them.
func (s *Server) publishCheckpoint(ctx context.Context, size int64) {
	if s.cfg.LedgerCheckpointRetention <= 0 || s.ledger == nil || size == 0 || size <= s.published.Load() {
		return
	}
	key := checkpointKey(size)
	if _, err := s.objects.Stat(ctx, key); err == nil {
		s.published.Store(size)
		return
	}
	cp, err := s.store.Checkpoint(ctx, size)
	if errors.Is(err, beamledger.ErrNotFound) {
		return // sealed without a signature: nothing to publish
	}
	if err == nil {
		_, err = s.objects.Put(ctx, key, strings.NewReader(cp.Note), int64(len(cp.Note)), objects.PutOptions{
			ContentType: "text/plain; charset=utf-8", RetainUntil: cp.SignedAt.Add(s.cfg.LedgerCheckpointRetention), Compliance: true})
	}
	if err != nil {
		s.log.Warn("publishing a checkpoint to the object store failed; the next seal tries again",
			slog.Int64("size", size), slog.Any("error", err))
		return
	}
	s.published.Store(size)
}

// signCheckpoint seals what is committed and returns the signed checkpoint of the
// resulting tree (the on-demand checkpoint). ErrUnavailable without a ledger key;
// ErrConflict while the ledger is empty.
func (s *Server) signCheckpoint(ctx context.Context) (provenance.Checkpoint, error) {
	if s.ledger == nil {
		return provenance.Checkpoint{}, beamledger.Unavailable("checkpoints cannot be signed: the server has no ledger key")
	}
	return s.store.SignCheckpoint(ctx, s.ledger, s.now())
}

// ledgerVerifierKey is the checkpoints' public key in the note format
// ("origin+hash+base64"), to publish beside them; "" without a ledger key.
func (s *Server) ledgerVerifierKey() string {
	if s.ledger == nil {
		return ""
	}
	return s.ledger.VerifierKey()
}
