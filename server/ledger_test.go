package server

import (
	"context"
	"crypto/ed25519"
	"errors"
	"io"
	"log/slog"
	"strings"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/postgres/pgtest"
)

// TestLedgerSealingJob runs the sealing job of a server with a ledger key and checks
// an event written meanwhile is sealed within a few intervals and signed in a
// checkpoint that the published verifier key accepts; the job stops with ctx.
func TestLedgerSealingJob(t *testing.T) {
	db := pgtest.Open(t)
	cfg, _ := testConfig("postgres://unused")
	_, cfg.LedgerKey, _ = ed25519.GenerateKey(nil)
	cfg.LedgerSealInterval = 20 * time.Millisecond
	cfg.ObjectDir = t.TempDir()
	s, err := New(cfg, db, slog.New(slog.NewJSONHandler(io.Discard, nil)), time.Now)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan struct{})
	go func() { s.sealLedgerEvery(ctx); close(stopped) }()
	defer func() {
		cancel()
		select {
		case <-stopped:
		case <-time.After(5 * time.Second):
			t.Error("the sealing job did not stop with its context")
		}
	}()

	if _, err := s.signCheckpoint(ctx); !errors.Is(err, beamledger.ErrConflict) {
		t.Errorf("checkpoint of an empty ledger: %v, want a conflict", err)
	}
	u, err := db.CreateUser(ctx, accounts.NewUser{Email: "ledger@test.example", DisplayName: "Ledger", Role: accounts.RoleResearcher}, "hash")
	if err != nil {
		t.Fatal(err)
	}
	p, err := db.CreateProject(ctx, accounts.NewProject{Code: "LEDGER-S", Title: "Ledger", PrincipalInvestigatorID: u.ID, RateClass: accounts.RateInternal})
	if err != nil {
		t.Fatal(err)
	}
	written := time.Now()
	sp, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: p.ID, Code: "L-1", CreatedBy: u.ID}, written)
	if err != nil {
		t.Fatal(err)
	}
	var ev provenance.LedgerEvent
	for deadline := time.Now().Add(5 * time.Second); ; {
		evs, err := db.EventsFor(ctx, provenance.EntitySpecimen, sp.ID)
		if err != nil || len(evs) != 1 {
			t.Fatalf("events = %v, %v", evs, err)
		}
		if ev = evs[0]; ev.Sealed() {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("the event was not sealed within 5 s")
		}
		time.Sleep(5 * time.Millisecond)
	}
	t.Logf("sealed %s after writing", time.Since(written).Round(time.Millisecond))
	cp, err := db.LatestCheckpoint(ctx)
	if err != nil {
		t.Fatal(err)
	}
	v, err := provenance.ParseVerifierKey(s.ledgerVerifierKey())
	if err != nil {
		t.Fatal(err)
	}
	if got, err := provenance.OpenCheckpoint([]byte(cp.Note), v); err != nil || got.Size != 1 || got.Origin != cfg.LedgerOrigin {
		t.Fatalf("checkpoint %+v: %v", got, err)
	}
	on, err := s.signCheckpoint(ctx)
	if err != nil || on.Size != 1 || on.Note != cp.Note {
		t.Errorf("on-demand checkpoint of an unchanged tree = %+v, %v; want the existing one", on, err)
	}
}

// TestLedgerConfig checks Run refuses to start without a ledger key and Validate
// refuses a ledger key that is the JWT key, a bad origin and a seal interval out of
// bounds.
func TestLedgerConfig(t *testing.T) {
	cfg, _ := testConfig("postgres://unused")
	cfg.LedgerKey = nil
	if err := Run(context.Background(), cfg, nil, slog.New(slog.NewJSONHandler(io.Discard, nil)), nil); err == nil ||
		!strings.Contains(err.Error(), "BEAMLEDGER_LEDGER_KEY") {
		t.Errorf("Run without a ledger key: %v", err)
	}
	cases := map[string]func(*Config){
		"ledger key is the JWT key": func(c *Config) { c.LedgerKey = c.SigningKey },
		"origin with a space":       func(c *Config) { c.LedgerOrigin = "my ledger" },
		"origin empty":              func(c *Config) { c.LedgerOrigin = "" },
		"seal interval too long":    func(c *Config) { c.LedgerSealInterval = time.Hour },
		"seal interval zero":        func(c *Config) { c.LedgerSealInterval = 0 },
		"ledger key all-zero": func(c *Config) {
			c.LedgerKey = ed25519.NewKeyFromSeed(make([]byte, ed25519.SeedSize))
		},
	}
	for name, change := range cases {
		c, _ := testConfig("postgres://unused")
		_, c.LedgerKey, _ = ed25519.GenerateKey(nil)
		if err := c.Validate(); err != nil {
			t.Fatalf("base: %v", err)
		}
		change(&c)
		if err := c.Validate(); err == nil || !strings.Contains(strings.ToLower(err.Error()), "ledger") {
			t.Errorf("%s: Validate() = %v, want a ledger error", name, err)
		}
	}
}
