package main

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// TestLedgerCommands calls cmdLedger directly (main.go registers it as `ledger`). It signs a checkpoint, prints the verifier key and verifies an
// intact ledger (exit 0), then edits one event in SQL past the triggers and expects
// verify to exit 3 naming it.
func TestLedgerCommands(t *testing.T) {
	url := pgtest.NewDatabase(t)
	ctx := context.Background()
	seed := make([]byte, ed25519.SeedSize)
	for i := range seed {
		seed[i] = byte(i*37 + 11)
	}
	t.Setenv("BEAMLEDGER_DATABASE_URL", url)
	t.Setenv("BEAMLEDGER_LEDGER_KEY", hex.EncodeToString(seed))
	t.Setenv("BEAMLEDGER_LEDGER_ORIGIN", "ledger.cmd.test.example")

	db, err := postgres.Open(ctx, url, 2)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	user, err := db.CreateUser(ctx, accounts.NewUser{Email: "cmd@example.org", DisplayName: "Cmd", Role: accounts.RoleResearcher}, "hash")
	if err != nil {
		t.Fatal(err)
	}
	project, err := db.CreateProject(ctx, accounts.NewProject{Code: "CMD-1", Title: "Cmd", PrincipalInvestigatorID: user.ID, RateClass: accounts.RateInternal})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 5; i++ {
		if _, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: project.ID, Code: fmt.Sprintf("C-%d", i), CreatedBy: user.ID}, time.Now()); err != nil {
			t.Fatal(err)
		}
	}

	var out, errOut bytes.Buffer
	if err := cmdLedger(ctx, []string{"checkpoint"}, &out, &errOut); err != nil {
		t.Fatalf("ledger checkpoint: %v\n%s", err, errOut.String())
	}
	if !strings.HasPrefix(out.String(), "ledger.cmd.test.example\n5\n") || !strings.Contains(out.String(), "\n— ledger.cmd.test.example ") {
		t.Fatalf("checkpoint printed:\n%s", out.String())
	}
	out.Reset()
	if err := cmdLedger(ctx, []string{"key"}, &out, &errOut); err != nil {
		t.Fatal(err)
	}
	vkey := strings.TrimSpace(out.String())
	if !strings.HasPrefix(vkey, "ledger.cmd.test.example+") {
		t.Fatalf("verifier key %q", vkey)
	}

	// verify needs only the public key: the secret one is taken away.
	t.Setenv("BEAMLEDGER_LEDGER_KEY", "")
	out.Reset()
	if err := cmdLedger(ctx, []string{"verify", "-key", vkey}, &out, &errOut); err != nil {
		t.Fatalf("verify of an intact ledger: %v\n%s", err, out.String())
	}
	if !strings.Contains(out.String(), "checked 5 sealed events, 1 tree heads and 1 checkpoints") || !strings.Contains(out.String(), "ledger intact: size 5") {
		t.Errorf("verify printed %q", out.String())
	}

	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, stmt := range []string{
		`SET session_replication_role = replica`,
		`UPDATE ledger_events SET leaf = convert_to(replace(convert_from(leaf, 'UTF8'), '"C-2"', '"C-9"'), 'UTF8') WHERE idx = 2`,
	} {
		if _, err := conn.Exec(ctx, stmt); err != nil {
			t.Fatal(err)
		}
	}
	out.Reset()
	err = cmdLedger(ctx, []string{"verify", "-key", vkey}, &out, &errOut)
	if exitCode(err) != exitFindings {
		t.Fatalf("verify of an edited ledger: %v (exit %d), want exit %d\n%s", err, exitCode(err), exitFindings, out.String())
	}
	if !strings.Contains(out.String(), "first bad event: 2") || !strings.Contains(err.Error(), "first bad event 2") {
		t.Errorf("verify printed %q, error %v", out.String(), err)
	}
	if err := cmdLedger(ctx, []string{"verify"}, &out, &errOut); err == nil || exitCode(err) == exitFindings {
		t.Errorf("verify without any key: %v, want a refusal before reading", err)
	}
}
