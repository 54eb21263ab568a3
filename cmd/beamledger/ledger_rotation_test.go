package main

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// TestLedgerVerifyAcrossKeyRotation signs checkpoints with one ledger key, rotates to
// a second and signs more, then verifies the stored ledger with both keys (nothing
// found), with each alone (the first checkpoint of the other key is the finding), and
// with the keys as a list and in a file. [constructed]
func TestLedgerVerifyAcrossKeyRotation(t *testing.T) {
	url := pgtest.NewDatabase(t)
	ctx := context.Background()
	const origin = "ledger.rotation.test.example"
	t.Setenv("BEAMLEDGER_DATABASE_URL", url)
	t.Setenv("BEAMLEDGER_LEDGER_ORIGIN", origin)
	seedA, seedB := make([]byte, ed25519.SeedSize), make([]byte, ed25519.SeedSize)
	for i := range seedA {
		seedA[i], seedB[i] = byte(i*41+7), byte(i*59+3)
	}

	db, err := postgres.Open(ctx, url, 2)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	user, err := db.CreateUser(ctx, accounts.NewUser{Email: "rotation@example.org", DisplayName: "Rotation", Role: accounts.RoleResearcher}, "hash")
	if err != nil {
		t.Fatal(err)
	}
	project, err := db.CreateProject(ctx, accounts.NewProject{Code: "ROT-1", Title: "Rotation", PrincipalInvestigatorID: user.ID, RateClass: accounts.RateInternal})
	if err != nil {
		t.Fatal(err)
	}
	specimens := 0
	addSpecimens := func(n int) {
		for range n {
			specimens++
			if _, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: project.ID, Code: fmt.Sprintf("R-%d", specimens), CreatedBy: user.ID}, time.Now()); err != nil {
				t.Fatal(err)
			}
		}
	}
	var out, errOut bytes.Buffer
	checkpoint := func(wantSize int) {
		t.Helper()
		out.Reset()
		if err := cmdLedger(ctx, []string{"checkpoint"}, &out, &errOut); err != nil {
			t.Fatalf("ledger checkpoint: %v\n%s", err, errOut.String())
		}
		if want := fmt.Sprintf("%s\n%d\n", origin, wantSize); !strings.HasPrefix(out.String(), want) {
			t.Fatalf("checkpoint printed %q, want it to start %q", out.String(), want)
		}
	}
	verifierKey := func() string {
		t.Helper()
		out.Reset()
		if err := cmdLedger(ctx, []string{"key"}, &out, &errOut); err != nil {
			t.Fatal(err)
		}
		return strings.TrimSpace(out.String())
	}

	t.Setenv("BEAMLEDGER_LEDGER_KEY", hex.EncodeToString(seedA))
	keyA := verifierKey()
	addSpecimens(3)
	checkpoint(3)
	addSpecimens(2)
	checkpoint(5)
	// The rotation: the same origin, a new key.
	t.Setenv("BEAMLEDGER_LEDGER_KEY", hex.EncodeToString(seedB))
	keyB := verifierKey()
	if keyA == keyB || !strings.HasPrefix(keyB, origin+"+") {
		t.Fatalf("verifier keys %q and %q", keyA, keyB)
	}
	addSpecimens(2)
	checkpoint(7) // the first checkpoint signed by B
	addSpecimens(1)
	checkpoint(8)
	t.Setenv("BEAMLEDGER_LEDGER_KEY", "") // verify needs only the public keys

	hashOf := func(vkey string) string { return strings.Split(vkey, "+")[1] }
	keyFile := filepath.Join(t.TempDir(), "ledger-verifiers.txt")
	if err := os.WriteFile(keyFile, []byte("# published ledger keys\n"+keyA+"\n\n"+keyB+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	for _, args := range [][]string{
		{"-key", keyA, "-key", keyB},
		{"-key", keyB + "," + keyA},
		{"-key", keyFile},
		{"-key", keyA, "-key", keyFile}, // A twice counts once
	} {
		out.Reset()
		if err := cmdLedger(ctx, append([]string{"verify"}, args...), &out, &errOut); err != nil {
			t.Fatalf("verify %q: %v\n%s", args, err, out.String())
		}
		if !strings.Contains(out.String(), "checked 8 sealed events, 4 tree heads and 4 checkpoints") || !strings.Contains(out.String(), "ledger intact: size 8") {
			t.Errorf("verify %q printed %q", args, out.String())
		}
	}

	for _, tt := range []struct {
		key, other string
		wantSize   int
		wantCount  int // checkpoints checked before the finding
	}{
		{keyA, keyB, 7, 2},
		{keyB, keyA, 3, 0},
	} {
		out.Reset()
		err := cmdLedger(ctx, []string{"verify", "-key", tt.key}, &out, &errOut)
		if exitCode(err) != exitFindings {
			t.Fatalf("verify with one key of two: %v (exit %d), want exit %d\n%s", err, exitCode(err), exitFindings, out.String())
		}
		want := fmt.Sprintf("first bad checkpoint: size %d: checkpoint signature: signed by none of the 1 given keys (signed by %s+%s)", tt.wantSize, origin, hashOf(tt.other))
		if !strings.Contains(out.String(), want) || !strings.Contains(out.String(), fmt.Sprintf("and %d checkpoints", tt.wantCount)) {
			t.Errorf("verify with one key printed %q, want %q", out.String(), want)
		}
		if !strings.Contains(err.Error(), fmt.Sprintf("checkpoint for size %d", tt.wantSize)) {
			t.Errorf("error %v does not name the checkpoint", err)
		}
	}

	for _, bad := range [][]string{{"-key", filepath.Join(t.TempDir(), "missing")}, {"-key", origin + "+00000000+AAAA"}, {"-key", ","}} {
		out.Reset()
		if err := cmdLedger(ctx, append([]string{"verify"}, bad...), &out, &errOut); err == nil || exitCode(err) == exitFindings {
			t.Errorf("verify %q: %v, want a refusal before reading", bad, err)
		}
	}
}
