package server

import (
	"context"
	"errors"
	"log/slog"
	"time"

	"beamledger"
	"beamledger/provenance"
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

// sealLedger seals what is committed now, signing a checkpoint if the tree grew.
func (s *Server) sealLedger(ctx context.Context) (provenance.TreeHead, error) {
	start := time.Now()
	head, err := s.store.SealLedger(ctx, s.ledger, s.now())
	s.jobDone(ctx, jobLedgerSeal, start, err)
	return head, err
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
