package provenance_test

import (
	"crypto/ed25519"
	"encoding/base64"
	"fmt"
	"strings"
	"testing"
	"time"

	"golang.org/x/mod/sumdb/note"
	"golang.org/x/mod/sumdb/tlog"

	"beamledger/provenance"
)

// TestOpenCheckpointKeys opens checkpoints of a ledger whose key was rotated: each is
// checked with the key its signature names, one signed by no given key is refused
// naming its signer, and a key whose name is not the checkpoint's origin does not
// vouch for it. [constructed]
func TestOpenCheckpointKeys(t *testing.T) {
	const origin = "ledger.keys.test.example"
	seed := func(k byte) ed25519.PrivateKey {
		s := make([]byte, ed25519.SeedSize)
		for i := range s {
			s[i] = byte(i)*k + 1
		}
		return ed25519.NewKeyFromSeed(s)
	}
	a, _ := provenance.NewCheckpointSigner(origin, seed(3))
	b, _ := provenance.NewCheckpointSigner(origin, seed(5))
	root := tlog.RecordHash([]byte("root"))
	now := time.Date(2031, 1, 2, 3, 4, 5, 0, time.UTC)
	byA, _ := a.Sign(10, root, now)
	byB, _ := b.Sign(12, root, now)

	for _, tc := range []struct {
		cp   provenance.Checkpoint
		keys []note.Verifier
	}{
		{byA, []note.Verifier{a.Verifier()}},
		{byA, []note.Verifier{b.Verifier(), a.Verifier()}},
		{byB, []note.Verifier{a.Verifier(), b.Verifier()}},
	} {
		got, err := provenance.OpenCheckpointKeys([]byte(tc.cp.Note), tc.keys...)
		if err != nil || got.Size != tc.cp.Size || got.Root != root || got.Origin != origin {
			t.Errorf("size %d with %d keys: %+v, %v", tc.cp.Size, len(tc.keys), got, err)
		}
	}

	_, err := provenance.OpenCheckpointKeys([]byte(byB.Note), a.Verifier())
	if want := fmt.Sprintf("signed by %s+%08x", origin, b.Verifier().KeyHash()); err == nil || !strings.Contains(err.Error(), want) {
		t.Errorf("B's checkpoint with A's key alone: %v, want an error containing %q", err, want)
	}
	if _, err := provenance.OpenCheckpointKeys([]byte(strings.Replace(byB.Note, "\n12\n", "\n13\n", 1)), a.Verifier(), b.Verifier()); err == nil {
		t.Error("an edited size passed")
	}
	// A key named otherwise signs a checkpoint claiming this ledger's origin.
	other, _ := provenance.NewCheckpointSigner("other.keys.test.example", seed(7))
	forged, err := note.Sign(&note.Note{Text: provenance.CheckpointBody(origin, 10, root)}, signerOf(t, other, seed(7)))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := provenance.OpenCheckpointKeys(forged, a.Verifier(), other.Verifier()); err == nil || !strings.Contains(err.Error(), "is not the name of the key") {
		t.Errorf("a checkpoint signed under another name: %v", err)
	}
}

// signerOf builds a note signer for key under s's name, in the note package's
// private-key text (algorithm byte 1, Ed25519, then the seed).
func signerOf(t *testing.T, s *provenance.CheckpointSigner, key ed25519.PrivateKey) note.Signer {
	t.Helper()
	text := fmt.Sprintf("PRIVATE+KEY+%s+%08x+%s", s.Origin(), s.Verifier().KeyHash(),
		base64.StdEncoding.EncodeToString(append([]byte{1}, key.Seed()...)))
	signer, err := note.NewSigner(text)
	if err != nil {
		t.Fatal(err)
	}
	return signer
}
