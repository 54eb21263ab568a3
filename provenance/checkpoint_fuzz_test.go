package provenance_test

import (
	"bytes"
	"crypto/ed25519"
	"strings"
	"testing"
	"time"

	"golang.org/x/mod/sumdb/tlog"

	"beamledger/provenance"
)

// FuzzOpenCheckpoint feeds checkpoints as an auditor's tool receives them, from a
// server or a bundle. Whatever the bytes, OpenCheckpoint answers without
// panicking, and what it accepts begins with exactly the tlog-checkpoint body of
// the origin, size and root it reports, under the key's own name. (Further
// signature lines by other keys, as witnesses add, are allowed by the signed-note
// format and change nothing the checkpoint states.)
func FuzzOpenCheckpoint(f *testing.F) {
	seed := make([]byte, ed25519.SeedSize)
	for i := range seed {
		seed[i] = byte(3*i + 1)
	}
	s, err := provenance.NewCheckpointSigner("ledger.fuzz.example", ed25519.NewKeyFromSeed(seed))
	if err != nil {
		f.Fatal(err)
	}
	root := tlog.RecordHash([]byte("leaf"))
	cp, err := s.Sign(42, root, time.Date(2026, 12, 2, 3, 0, 0, 0, time.UTC))
	if err != nil {
		f.Fatal(err)
	}
	f.Add([]byte(cp.Note))
	f.Add([]byte(strings.Replace(cp.Note, "42", "43", 1)))
	f.Add([]byte("ledger.fuzz.example\n1\n\n\n— ledger.fuzz.example AAAA\n"))
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, b []byte) {
		got, err := provenance.OpenCheckpoint(b, s.Verifier())
		if err != nil {
			return
		}
		body := provenance.CheckpointBody(got.Origin, got.Size, got.Root)
		if !bytes.HasPrefix(b, []byte(body+"\n")) || got.Origin != "ledger.fuzz.example" {
			t.Fatalf("accepted %q as size %d root %v", b, got.Size, got.Root)
		}
	})
}
