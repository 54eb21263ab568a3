package main

import (
	"archive/zip"
	"bytes"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"golang.org/x/mod/sumdb/tlog"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/provenance/bundle"
)

type hashList []tlog.Hash

func (h hashList) ReadHashes(idx []int64) ([]tlog.Hash, error) {
	out := make([]tlog.Hash, len(idx))
	for i, x := range idx {
		out[i] = h[x]
	}
	return out, nil
}

// testBundle writes a bundle for a constructed trace [constructed]: the file "abc"
// recorded in a ledger of two sealed events, signed with a key from seed.
func testBundle(t *testing.T, seed byte) (zipBytes []byte, signer *provenance.CheckpointSigner) {
	t.Helper()
	signer, err := provenance.NewCheckpointSigner("ledger.cmd.test.example", ed25519.NewKeyFromSeed(bytes.Repeat([]byte{seed}, 32)))
	if err != nil {
		t.Fatal(err)
	}
	at := time.Date(2026, 11, 3, 9, 0, 0, 0, time.UTC)
	sum := sha256.Sum256([]byte("abc"))
	f := provenance.DataFile{ID: "f0000000-0000-4000-8000-0000000000aa", ProjectID: "b0000000-0000-4000-8000-0000000000aa", SHA256: hex.EncodeToString(sum[:]),
		SizeBytes: 3, MediaType: "text/plain", FileName: "abc.txt", Status: provenance.FileStored}
	var hashes hashList
	var events []provenance.TraceEvent
	for i, c := range []struct {
		typ, id string
		state   any
	}{{provenance.EntitySpecimen, "s1", map[string]string{"code": "x"}}, {provenance.EntityDataFile, f.ID, f}} {
		ev, err := provenance.NewLedgerEvent("someone", provenance.ActionCreate, c.typ, c.id, at, c.state)
		if err != nil {
			t.Fatal(err)
		}
		hs, err := tlog.StoredHashes(int64(i), ev.Leaf, hashes)
		if err != nil {
			t.Fatal(err)
		}
		hashes = append(hashes, hs...)
		idx := int64(i)
		ev.Index = &idx
		events = append(events, provenance.TraceEvent{LedgerEvent: ev})
	}
	root, _ := tlog.TreeHash(2, hashes)
	cp, err := signer.Sign(2, root, at)
	if err != nil {
		t.Fatal(err)
	}
	ev := events[1]
	p := provenance.InclusionProof{Index: 1, Size: 2, LeafHash: ev.LeafHash(), Root: root}
	p.Proof, _ = tlog.ProveRecord(2, 1, hashes)
	ev.Sealed, ev.Proof = true, &p
	tr := provenance.Trace{SHA256: f.SHA256, File: f, Project: accounts.Project{ID: f.ProjectID, Code: "P-1"},
		Ledger: provenance.TraceLedger{Checkpoint: &cp, KeyName: cp.Origin, Records: []provenance.TraceRecord{{EntityType: provenance.EntityDataFile, EntityID: f.ID, Events: []provenance.TraceEvent{ev}}}}}
	var buf bytes.Buffer
	if err := bundle.Write(&buf, bundle.Contents{Trace: tr, Namespace: "https://ledger.cmd.test.example/prov#", Published: at, Data: strings.NewReader("abc")}); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes(), signer
}

// flipData rewrites the bundle with one byte of the data file changed and the
// manifest recomputed.
func flipData(t *testing.T, b []byte) []byte {
	t.Helper()
	zr, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
	if err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	zw := zip.NewWriter(&out)
	digests := map[string]string{}
	for _, f := range zr.File {
		rc, _ := f.Open()
		body, _ := io.ReadAll(rc)
		rc.Close()
		if f.Name == bundle.ManifestName {
			continue
		}
		if f.Name == "data/abc.txt" {
			body = []byte("abd")
		}
		s := sha256.Sum256(body)
		digests[f.Name] = hex.EncodeToString(s[:])
		w, _ := zw.Create(f.Name)
		w.Write(body)
	}
	w, _ := zw.Create(bundle.ManifestName)
	w.Write(bundle.Manifest(digests))
	zw.Close()
	return out.Bytes()
}

func TestVerifyBundleCommand(t *testing.T) {
	dir := t.TempDir()
	good, signer := testBundle(t, 7)
	goodPath, badPath := filepath.Join(dir, "good.zip"), filepath.Join(dir, "bad.zip")
	os.WriteFile(goodPath, good, 0o644)
	os.WriteFile(badPath, flipData(t, good), 0o644)
	answer, _ := json.Marshal(map[string]string{"origin": signer.Origin(), "verifier_key": signer.VerifierKey()})
	keyFile := filepath.Join(dir, "key.json")
	os.WriteFile(keyFile, answer, 0o644)
	_, other := testBundle(t, 8)

	for _, c := range []struct {
		name   string
		args   []string
		code   int // 0 for success
		stdout string
		stderr string
	}{
		{"intact, key as text", []string{goodPath, "--key", signer.VerifierKey()}, 0, "verified", ""},
		{"intact, key first, from the key answer file", []string{"-key", keyFile, goodPath}, 0, "1 ledger event(s) proved", ""},
		{"a data byte changed", []string{badPath, "--key", signer.VerifierKey()}, exitFindings, "", "data file data/abc.txt has SHA-256"},
		{"another facility's key", []string{goodPath, "--key", other.VerifierKey()}, exitFindings, "", "ledger/checkpoint.txt: checkpoint signature"},
		{"not a zip", []string{keyFile, "--key", signer.VerifierKey()}, exitFindings, "", "not a zip archive"},
		{"no key", []string{goodPath}, exitBadInput, "", "--key is required"},
		{"two bundles", []string{goodPath, badPath, "--key", signer.VerifierKey()}, exitBadInput, "", "name one bundle"},
	} {
		t.Run(c.name, func(t *testing.T) {
			var stdout, stderr bytes.Buffer
			err := run(t.Context(), append([]string{"verify-bundle"}, c.args...), &stdout, &stderr)
			code := 0
			if err != nil {
				code = exitCode(err)
				stderr.WriteString(err.Error())
			}
			if code != c.code {
				t.Fatalf("exit %d, want %d; stdout %q stderr %q", code, c.code, stdout.String(), stderr.String())
			}
			if !strings.Contains(stdout.String(), c.stdout) || !strings.Contains(stderr.String(), c.stderr) {
				t.Errorf("stdout %q, stderr %q; want %q and %q", stdout.String(), stderr.String(), c.stdout, c.stderr)
			}
		})
	}
	if err := run(t.Context(), []string{"verify-bundle", goodPath, "--key", "not a key"}, io.Discard, io.Discard); !errors.As(err, new(*exitError)) || exitCode(err) != exitBadInput {
		t.Errorf("a malformed key: %v", err)
	}
}
