package bundle_test

import (
	"archive/zip"
	"bytes"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"io"
	"runtime"
	"strings"
	"testing"
	"time"

	"golang.org/x/mod/sumdb/tlog"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/provenance/bundle"
)

// rfc8032Seed is the secret key of RFC 8032 §7.1 test 1 [published: RFC 8032 §7.1].
const rfc8032Seed = "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"

const origin = "ledger.facility.example"

func signer(t testing.TB, seedHex string) *provenance.CheckpointSigner {
	t.Helper()
	seed, _ := hex.DecodeString(seedHex)
	s, err := provenance.NewCheckpointSigner(origin, ed25519.NewKeyFromSeed(seed))
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// memLog is an in-memory RFC 6962 tree with tlog's stored-hash numbering.
type memLog struct{ hashes []tlog.Hash }

func (m *memLog) ReadHashes(idx []int64) ([]tlog.Hash, error) {
	out := make([]tlog.Hash, len(idx))
	for i, x := range idx {
		out[i] = m.hashes[x]
	}
	return out, nil
}

// fixture is a constructed trace [constructed] of a 3-byte raw file, "abc", whose
// record, acquisition and a derivation from it are in a ledger of four sealed
// events (one of another record between them) signed with the RFC 8032 test key,
// plus one event not yet sealed.
func fixture(t testing.TB) (provenance.Trace, []byte) {
	t.Helper()
	data := []byte("abc")
	at := time.Date(2026, 11, 3, 9, 30, 0, 0, time.UTC)
	acq := "a0000000-0000-4000-8000-000000000001"
	sum := sha256.Sum256(data)
	f := provenance.DataFile{ID: "f0000000-0000-4000-8000-000000000001", ProjectID: "b0000000-0000-4000-8000-000000000001", AcquisitionID: &acq,
		SHA256: hex.EncodeToString(sum[:]), SizeBytes: int64(len(data)), MediaType: "image/tiff", FileName: "frame-001.tif", Status: provenance.FileStored,
		UploadedBy: "e0000000-0000-4000-8000-000000000001", CreatedAt: at, StoredAt: &at}
	tr := provenance.Trace{SHA256: f.SHA256, File: f, OtherRecords: []string{},
		Project: accounts.Project{ID: f.ProjectID, Code: "P-118", Title: "Grain boundaries"}}
	type change struct {
		typ, id string
		state   any
	}
	changes := []change{
		{provenance.EntityAcquisition, acq, map[string]any{"id": acq, "version": 1}},
		{provenance.EntitySpecimen, "50000000-0000-4000-8000-000000000009", map[string]any{"code": "other"}},
		{provenance.EntityDataFile, f.ID, f},
		{provenance.EntityDerivation, "d0000000-0000-4000-8000-000000000001", map[string]any{"software": "drift-align"}},
		{provenance.EntityDerivation, "d0000000-0000-4000-8000-000000000001", map[string]any{"note": "unsealed"}},
	}
	log := &memLog{}
	var events []provenance.LedgerEvent
	for i, c := range changes {
		ev, err := provenance.NewLedgerEvent(f.UploadedBy, provenance.ActionCreate, c.typ, c.id, at.Add(time.Duration(i)*time.Minute), c.state)
		if err != nil {
			t.Fatal(err)
		}
		if i < 4 {
			hs, err := tlog.StoredHashes(int64(i), ev.Leaf, log)
			if err != nil {
				t.Fatal(err)
			}
			log.hashes = append(log.hashes, hs...)
			idx := int64(i)
			ev.Index = &idx
		}
		events = append(events, ev)
	}
	root, err := tlog.TreeHash(4, log)
	if err != nil {
		t.Fatal(err)
	}
	cp, err := signer(t, rfc8032Seed).Sign(4, root, at.Add(time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	tr.Ledger = provenance.TraceLedger{Checkpoint: &cp, KeyName: origin}
	for _, ev := range events {
		if ev.EntityType == provenance.EntitySpecimen {
			continue
		}
		te := provenance.TraceEvent{LedgerEvent: ev}
		if ev.Index != nil {
			p := provenance.InclusionProof{Index: *ev.Index, Size: 4, LeafHash: ev.LeafHash(), Root: root}
			if p.Proof, err = tlog.ProveRecord(4, *ev.Index, log); err != nil {
				t.Fatal(err)
			}
			te.Sealed, te.Proof = true, &p
		}
		n := len(tr.Ledger.Records)
		if n == 0 || tr.Ledger.Records[n-1].EntityID != ev.EntityID {
			tr.Ledger.Records = append(tr.Ledger.Records, provenance.TraceRecord{EntityType: ev.EntityType, EntityID: ev.EntityID})
			n++
		}
		tr.Ledger.Records[n-1].Events = append(tr.Ledger.Records[n-1].Events, te)
	}
	return tr, data
}

func write(t testing.TB, tr provenance.Trace, data []byte) []byte {
	t.Helper()
	c := bundle.Contents{Trace: tr, Namespace: "https://" + origin + "/prov#", Published: time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC),
		FileURL: "https://facility.example/api/v1/files/" + tr.File.ID + "/content"}
	if data != nil {
		c.Data = bytes.NewReader(data)
	}
	var buf bytes.Buffer
	if err := bundle.Write(&buf, c); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func verify(t *testing.T, b []byte, seedHex string) (bundle.Summary, error) {
	t.Helper()
	return bundle.Verify(bytes.NewReader(b), int64(len(b)), signer(t, seedHex).Verifier())
}

// members reads an archive's members in order.
func members(t *testing.T, b []byte) ([]string, map[string][]byte) {
	t.Helper()
	zr, err := zip.NewReader(bytes.NewReader(b), int64(len(b)))
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	out := map[string][]byte{}
	for _, f := range zr.File {
		rc, err := f.Open()
		if err != nil {
			t.Fatal(err)
		}
		body, _ := io.ReadAll(rc)
		rc.Close()
		names = append(names, f.Name)
		out[f.Name] = body
	}
	return names, out
}

// rezip writes members back in order; a nil body leaves the member out. With
// fixManifest the manifest is recomputed, as a careful forger would.
func rezip(t *testing.T, names []string, m map[string][]byte, fixManifest bool) []byte {
	t.Helper()
	if fixManifest {
		d := map[string]string{}
		for _, n := range names {
			if m[n] != nil && n != bundle.ManifestName {
				s := sha256.Sum256(m[n])
				d[n] = hex.EncodeToString(s[:])
			}
		}
		m[bundle.ManifestName] = bundle.Manifest(d)
	}
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	for _, n := range names {
		if m[n] == nil {
			continue
		}
		w, err := zw.Create(n)
		if err != nil {
			t.Fatal(err)
		}
		w.Write(m[n])
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func TestBundleRoundTrip(t *testing.T) {
	tr, data := fixture(t)
	b := write(t, tr, data)
	s, err := verify(t, b, rfc8032Seed)
	if err != nil {
		t.Fatalf("an untouched bundle fails: %v", err)
	}
	// [published: FIPS 180-4 examples] SHA-256("abc").
	if s.SHA256 != "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad" || !s.DataIncluded || s.Events != 3 || s.TreeSize != 4 || s.Origin != origin {
		t.Errorf("summary %+v", s)
	}
	names, m := members(t, b)
	want := []string{"ro-crate-metadata.json", "prov.json", "trace.json", "ledger/checkpoint.txt", "ledger/events/0.json", "ledger/proofs/0.json",
		"ledger/events/2.json", "ledger/proofs/2.json", "ledger/events/3.json", "ledger/proofs/3.json", "data/frame-001.tif", "manifest-sha256.txt"}
	if strings.Join(names, " ") != strings.Join(want, " ") {
		t.Errorf("members:\n got %v\nwant %v", names, want)
	}
	// The unsealed event and the other record's event stay out; the leaf is the
	// event's canonical bytes as the tree holds them.
	if !bytes.Equal(m["ledger/events/2.json"], tr.Ledger.Records[1].Events[0].Leaf) {
		t.Errorf("event 2 is not the data file's leaf")
	}
	checkCrate(t, m["ro-crate-metadata.json"])

	// Without the bytes the crate names the file by URL and the bundle still verifies.
	s, err = verify(t, write(t, tr, nil), rfc8032Seed)
	if err != nil || s.DataIncluded {
		t.Errorf("without data: %+v %v", s, err)
	}
}

// checkCrate holds the metadata to RO-Crate 1.1 [published: RO-Crate 1.1
// specification, as summarised in REFERENCE.md §5].
func checkCrate(t *testing.T, b []byte) {
	t.Helper()
	var c struct {
		Context string           `json:"@context"`
		Graph   []map[string]any `json:"@graph"`
	}
	if err := json.Unmarshal(b, &c); err != nil {
		t.Fatal(err)
	}
	if c.Context != "https://w3id.org/ro/crate/1.1/context" {
		t.Errorf("@context %q", c.Context)
	}
	by := map[string]map[string]any{}
	for _, e := range c.Graph {
		by[e["@id"].(string)] = e
		for k, v := range e {
			if _, nested := v.(map[string]any); nested && k != "conformsTo" && k != "about" && k != "license" && k != "mainEntity" {
				t.Errorf("%s.%s nests an entity; the @graph must be flat", e["@id"], k)
			}
		}
	}
	d := by["ro-crate-metadata.json"]
	if d["@type"] != "CreativeWork" || d["conformsTo"].(map[string]any)["@id"] != "https://w3id.org/ro/crate/1.1" || d["about"].(map[string]any)["@id"] != "./" {
		t.Errorf("descriptor %v", d)
	}
	root := by["./"]
	if _, err := time.Parse(time.RFC3339, root["datePublished"].(string)); err != nil || root["@type"] != "Dataset" || root["name"] == nil || root["description"] == nil || root["license"] == nil {
		t.Errorf("root %v", root)
	}
	for _, p := range root["hasPart"].([]any) {
		e := by[p.(map[string]any)["@id"].(string)]
		if e == nil || e["@type"] != "File" || !provenance.ValidSHA256(e["sha256"].(string)) || e["contentSize"] == "" {
			t.Errorf("hasPart %v is not a File with sha256 and contentSize: %v", p, e)
		}
	}
}

// TestBundleTampering changes one part of a bundle at a time and expects the
// verifier to name what changed. Except for the manifest case, the manifest is
// recomputed, so each check must catch the change on its own.
func TestBundleTampering(t *testing.T) {
	tr, data := fixture(t)
	good := write(t, tr, data)
	for _, c := range []struct {
		name   string
		change func(m map[string][]byte)
		fix    bool
		seed   string // the key the verifier is given; the signing key when empty
		want   string
	}{
		{name: "event bytes", fix: true, want: "ledger/events/2.json: its leaf hash", change: func(m map[string][]byte) {
			m["ledger/events/2.json"] = bytes.Replace(m["ledger/events/2.json"], []byte("frame-001"), []byte("frame-002"), 1)
		}},
		{name: "proof hash", fix: true, want: "ledger/proofs/3.json: the inclusion proof does not lead", change: func(m map[string][]byte) {
			var p map[string]any
			json.Unmarshal(m["ledger/proofs/3.json"], &p)
			p["proof"].([]any)[0] = "47DEQpj8HBSa+/TImW+5JCeuQeRkm5NMpJWZG3hSuFU="
			m["ledger/proofs/3.json"], _ = json.Marshal(p)
		}},
		{name: "checkpoint text", fix: true, want: "ledger/checkpoint.txt: checkpoint signature", change: func(m map[string][]byte) {
			m["ledger/checkpoint.txt"] = bytes.Replace(m["ledger/checkpoint.txt"], []byte("\n4\n"), []byte("\n5\n"), 1)
		}},
		{name: "signature key", seed: strings.Repeat("11", 32), want: "ledger/checkpoint.txt: checkpoint signature", change: func(map[string][]byte) {}},
		{name: "data file byte", fix: true, want: "data file data/frame-001.tif has SHA-256", change: func(m map[string][]byte) {
			m["data/frame-001.tif"] = []byte("abd")
		}},
		{name: "manifest entry", want: "manifest: member prov.json has SHA-256", change: func(m map[string][]byte) {
			m["manifest-sha256.txt"] = bytes.Replace(m["manifest-sha256.txt"], []byte("  prov.json"), []byte("x  prov.json"), 1)
			lines := strings.Split(string(m["manifest-sha256.txt"]), "\n")
			for i, l := range lines {
				if strings.HasSuffix(l, "x  prov.json") {
					lines[i] = strings.Repeat("0", 64) + "  prov.json"
				}
			}
			m["manifest-sha256.txt"] = []byte(strings.Join(lines, "\n"))
		}},
		{name: "crate digest", fix: true, want: "prov.json names SHA-256 ba7816bf", change: func(m map[string][]byte) {
			m["ro-crate-metadata.json"] = bytes.Replace(m["ro-crate-metadata.json"], []byte(`"sha256": "ba7816bf`), []byte(`"sha256": "ca7816bf`), 1)
		}},
		{name: "missing member", fix: true, want: "member prov.json is missing", change: func(m map[string][]byte) { m["prov.json"] = nil }},
		{name: "missing proof", fix: true, want: "member ledger/proofs/0.json is missing", change: func(m map[string][]byte) { m["ledger/proofs/0.json"] = nil }},
		{name: "member outside the manifest", want: "member ledger/events/9.json is not in the manifest", change: func(m map[string][]byte) {
			m["ledger/events/9.json"] = []byte("{}")
		}},
	} {
		t.Run(c.name, func(t *testing.T) {
			names, m := members(t, good)
			c.change(m)
			if m["ledger/events/9.json"] != nil {
				names = append(names, "ledger/events/9.json")
			}
			b := rezip(t, names, m, c.fix)
			seed := c.seed
			if seed == "" {
				seed = rfc8032Seed
			}
			_, err := verify(t, b, seed)
			if err == nil {
				t.Fatalf("the tampered bundle verified")
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %q does not say %q", err, c.want)
			}
		})
	}
}

// TestBundleRefusesUnsealedFile: a bundle is made only once a signed checkpoint
// covers the file's record.
func TestBundleRefusesUnsealedFile(t *testing.T) {
	tr, data := fixture(t)
	for i := range tr.Ledger.Records {
		if tr.Ledger.Records[i].EntityType == provenance.EntityDataFile {
			for j := range tr.Ledger.Records[i].Events {
				tr.Ledger.Records[i].Events[j].Sealed = false
			}
		}
	}
	err := bundle.Write(io.Discard, bundle.Contents{Trace: tr, Data: bytes.NewReader(data)})
	if err != bundle.ErrUnsealed {
		t.Errorf("err = %v", err)
	}
}

// zeros reads as an endless run of zero bytes.
type zeros struct{}

func (zeros) Read(p []byte) (int, error) { clear(p); return len(p), nil }

// TestBundleStreamsData: writing a 256 MiB file allocates about what a 1 MiB one
// does; the bytes pass through and are not held.
func TestBundleStreamsData(t *testing.T) {
	tr, _ := fixture(t)
	alloc := func(size int64) uint64 {
		tr.File.SizeBytes = size
		var before, after runtime.MemStats
		runtime.GC()
		runtime.ReadMemStats(&before)
		err := bundle.Write(io.Discard, bundle.Contents{Trace: tr, Namespace: "https://x.example/", Data: io.LimitReader(zeros{}, size)})
		runtime.ReadMemStats(&after)
		if err != nil {
			t.Fatal(err)
		}
		return after.TotalAlloc - before.TotalAlloc
	}
	small, large := alloc(1<<20), alloc(256<<20)
	// [constructed] 256 times the data may cost at most 4 MiB more allocation.
	if large > small+4<<20 {
		t.Errorf("allocated %d bytes for 256 MiB against %d for 1 MiB", large, small)
	}
}

// TestDataName keeps the data member inside data/ whatever the recorded name.
func TestDataName(t *testing.T) {
	for name, want := range map[string]string{"frame.tif": "data/frame.tif", ".": "data/data-file", "..x": "data/..x"} {
		if got := bundle.DataName(provenance.DataFile{FileName: name}); got != want {
			t.Errorf("DataName(%q) = %q, want %q", name, got, want)
		}
	}
}
