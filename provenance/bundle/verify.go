package bundle

import (
	"archive/zip"
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"slices"
	"strconv"
	"strings"

	"golang.org/x/mod/sumdb/note"
	"golang.org/x/mod/sumdb/tlog"

	"beamledger/provenance"
)

// Summary is what a verified bundle shows.
type Summary struct {
	FileID       string
	SHA256       string
	FileName     string
	SizeBytes    int64
	DataIncluded bool
	Events       int
	Origin       string
	TreeSize     int64
	Members      int
}

// maxMember bounds a small member read into memory: events, proofs and metadata are
// kilobytes, and a hostile archive must not make the verifier allocate gigabytes.
const maxMember = 64 << 20

// Verify checks a bundle with no server: every member's digest against the
// manifest (and no member missing from it or it from the archive), the checkpoint's
// signature with the verifier key, each event's leaf hash and inclusion proof
// against the checkpoint's root, that a proved event records the data file with its
// digest, that the RO-Crate metadata, the PROV-JSON document and the trace name the
// same digest, and the data file's bytes when present. The error lists every
// failure found, each naming the member it is about.
func Verify(r io.ReaderAt, size int64, key note.Verifier) (Summary, error) {
	var s Summary
	zr, err := zip.NewReader(r, size)
	if err != nil {
		return s, fmt.Errorf("not a zip archive: %w", err)
	}
	v := &verifier{zr: zr, files: map[string]*zip.File{}, hashed: map[string]hashedMember{}}
	for _, f := range zr.File {
		if _, dup := v.files[f.Name]; dup {
			v.fail("member %s appears twice", f.Name)
		}
		v.files[f.Name] = f
	}
	s.Members = len(zr.File)
	manifest := v.checkManifest()
	cp, cpOK := v.checkCheckpoint(key)
	if cpOK {
		s.Origin, s.TreeSize = cp.Origin, cp.Size
	}
	mainID, fileID, digest, crateSize, crateOK := v.checkCrate(manifest)
	s.FileID, s.SHA256, s.SizeBytes = fileID, digest, crateSize
	if crateOK {
		v.checkNames(fileID, digest, &s)
		v.checkData(mainID, digest, crateSize, &s)
	}
	if cpOK {
		s.Events = v.checkEvents(cp, fileID, digest, crateOK)
	}
	return s, errors.Join(v.problems...)
}

type verifier struct {
	zr       *zip.Reader
	files    map[string]*zip.File
	problems []error
	// hashed keeps each member's digest and size once streamed, so a data file of
	// many gigabytes is read once, not once for the manifest and again for itself.
	hashed map[string]hashedMember
}

type hashedMember struct {
	digest string
	size   int64
}

func (v *verifier) fail(format string, args ...any) {
	v.problems = append(v.problems, fmt.Errorf(format, args...))
}

// read returns a small member's bytes, or nil after recording why not.
func (v *verifier) read(name string) []byte {
	f, ok := v.files[name]
	if !ok {
		v.fail("member %s is missing", name)
		return nil
	}
	rc, err := f.Open()
	if err != nil {
		v.fail("member %s: %v", name, err)
		return nil
	}
	defer rc.Close()
	b, err := io.ReadAll(io.LimitReader(rc, maxMember+1))
	if err != nil || len(b) > maxMember {
		v.fail("member %s cannot be read (or is over %d bytes): %v", name, maxMember, err)
		return nil
	}
	return b
}

// digestOf streams a member through SHA-256, whatever its size, once.
func (v *verifier) digestOf(f *zip.File) (string, int64, error) {
	if h, ok := v.hashed[f.Name]; ok {
		return h.digest, h.size, nil
	}
	rc, err := f.Open()
	if err != nil {
		return "", 0, err
	}
	defer rc.Close()
	h := sha256.New()
	n, err := io.Copy(h, rc)
	if err != nil {
		return "", n, err
	}
	d := hex.EncodeToString(h.Sum(nil))
	v.hashed[f.Name] = hashedMember{d, n}
	return d, n, nil
}

// checkManifest checks every member against the manifest, both ways.
func (v *verifier) checkManifest() map[string]string {
	b := v.read(ManifestName)
	if b == nil {
		return nil
	}
	m, err := ParseManifest(b)
	if err != nil {
		v.fail("%v", err)
		return nil
	}
	for _, name := range slices.Sorted(maps.Keys(m)) {
		f, ok := v.files[name]
		if !ok {
			v.fail("member %s is missing (the manifest lists it)", name)
			continue
		}
		got, _, err := v.digestOf(f)
		switch {
		case err != nil:
			v.fail("member %s: %v", name, err)
		case got != m[name]:
			v.fail("manifest: member %s has SHA-256 %s, the manifest says %s", name, got, m[name])
		}
	}
	for _, f := range v.zr.File {
		if _, ok := m[f.Name]; !ok && f.Name != ManifestName {
			v.fail("member %s is not in the manifest", f.Name)
		}
	}
	return m
}

// checkCheckpoint opens the signed checkpoint with the key.
func (v *verifier) checkCheckpoint(key note.Verifier) (provenance.Checkpoint, bool) {
	b := v.read(CheckpointName)
	if b == nil {
		return provenance.Checkpoint{}, false
	}
	cp, err := provenance.OpenCheckpoint(b, key)
	if err != nil {
		v.fail("%s: %v", CheckpointName, err)
		return cp, false
	}
	return cp, true
}

// checkCrate reads the RO-Crate metadata and holds its File entities' digests to
// the manifest.
func (v *verifier) checkCrate(manifest map[string]string) (mainID, fileID, digest string, size int64, ok bool) {
	b := v.read(CrateName)
	if b == nil {
		return "", "", "", 0, false
	}
	mainID, fileID, digest, size, err := crateMain(b)
	if err != nil {
		v.fail("%v", err)
		return "", "", "", 0, false
	}
	if !provenance.ValidSHA256(digest) {
		v.fail("%s: the data file's sha256 %q is not a SHA-256", CrateName, digest)
		return "", "", "", 0, false
	}
	var c struct {
		Graph []crateFile `json:"@graph"`
	}
	_ = json.Unmarshal(b, &c)
	for _, e := range c.Graph {
		if want, listed := manifest[e.ID]; listed && e.Type == "File" && e.SHA256 != want {
			v.fail("%s: File %s has sha256 %s, the manifest says %s", CrateName, e.ID, e.SHA256, want)
		}
	}
	return mainID, fileID, digest, size, true
}

// checkNames holds the PROV-JSON document and the trace to the crate's digest.
func (v *verifier) checkNames(fileID, digest string, s *Summary) {
	if b := v.read(ProvName); b != nil {
		d, err := provenance.ProvFileDigest(b, fileID)
		switch {
		case err != nil:
			v.fail("%s: %v", ProvName, err)
		case d != digest:
			v.fail("%s names SHA-256 %s for the data file, %s names %s", ProvName, d, CrateName, digest)
		}
	}
	if b := v.read(TraceName); b != nil {
		var t struct {
			SHA256 string `json:"sha256"`
			File   struct {
				ID       string `json:"id"`
				FileName string `json:"file_name"`
			} `json:"file"`
		}
		if err := json.Unmarshal(b, &t); err != nil {
			v.fail("%s is not JSON: %v", TraceName, err)
			return
		}
		s.FileName = t.File.FileName
		if t.SHA256 != digest || t.File.ID != fileID {
			v.fail("%s is the trace of %s (SHA-256 %s), %s names %s (SHA-256 %s)", TraceName, t.File.ID, t.SHA256, CrateName, fileID, digest)
		}
	}
}

// checkData hashes the data file when the bundle holds it.
func (v *verifier) checkData(mainID, digest string, size int64, s *Summary) {
	if !strings.HasPrefix(mainID, DataDir) {
		return // a web-based data entity: the bytes are elsewhere
	}
	f, ok := v.files[mainID]
	if !ok {
		v.fail("member %s is missing (the crate's main entity)", mainID)
		return
	}
	got, n, err := v.digestOf(f)
	switch {
	case err != nil:
		v.fail("member %s: %v", mainID, err)
	case got != digest:
		v.fail("data file %s has SHA-256 %s, not the %s the crate, the trace and the ledger name", mainID, got, digest)
	case n != size:
		v.fail("data file %s has %d bytes, the crate says %d", mainID, n, size)
	default:
		s.DataIncluded = true
	}
}

// checkEvents checks each event against its proof and the checkpoint, and that one
// of them records the data file with its digest.
func (v *verifier) checkEvents(cp provenance.Checkpoint, fileID, digest string, crateOK bool) int {
	var indexes []int64
	for name := range v.files {
		rest, ok := strings.CutPrefix(name, EventDir)
		if !ok {
			continue
		}
		i, err := strconv.ParseInt(strings.TrimSuffix(rest, ".json"), 10, 64)
		if err != nil || !strings.HasSuffix(rest, ".json") || EventName(i) != name {
			v.fail("member %s is not named <index>.json", name)
			continue
		}
		indexes = append(indexes, i)
	}
	slices.Sort(indexes)
	recorded := false
	for _, i := range indexes {
		ev, ok := v.checkEvent(cp, i)
		if ok && ev.EntityType == provenance.EntityDataFile && ev.EntityID == fileID {
			var st struct {
				SHA256 string `json:"sha256"`
			}
			if json.Unmarshal(ev.State, &st) == nil && st.SHA256 == digest {
				recorded = true
			}
		}
	}
	for name := range v.files {
		if rest, ok := strings.CutPrefix(name, ProofDir); ok {
			if _, has := v.files[EventDir+rest]; !has {
				v.fail("member %s proves an event the bundle does not hold", name)
			}
		}
	}
	if crateOK && !recorded {
		v.fail("no proved ledger event records data file %s with SHA-256 %s", fileID, digest)
	}
	return len(indexes)
}

// checkEvent checks one event: canonical bytes, a proof for this index and the
// checkpoint's tree, the leaf hash the proof is about, and the audit path to the root.
func (v *verifier) checkEvent(cp provenance.Checkpoint, i int64) (provenance.LedgerEvent, bool) {
	name := EventName(i)
	leaf := v.read(name)
	pb := v.read(ProofName(i))
	if leaf == nil || pb == nil {
		return provenance.LedgerEvent{}, false
	}
	ev, err := provenance.ParseLeaf(leaf)
	if err != nil {
		v.fail("%s: %v", name, err)
		return ev, false
	}
	var p provenance.InclusionProof
	if err := json.Unmarshal(pb, &p); err != nil {
		v.fail("%s: %v", ProofName(i), err)
		return ev, false
	}
	h := tlog.RecordHash(leaf)
	switch {
	case p.Index != i:
		v.fail("%s proves index %d, not %d", ProofName(i), p.Index, i)
	case p.Size != cp.Size || p.Root != cp.Root:
		v.fail("%s is against the tree of %d leaves with root %s, not the checkpoint's %d and %s", ProofName(i), p.Size, p.Root, cp.Size, cp.Root)
	case p.LeafHash != h:
		v.fail("%s: its leaf hash %s is not the one %s proves (%s)", name, h, ProofName(i), p.LeafHash)
	case tlog.CheckRecord(p.Proof, cp.Size, cp.Root, i, h) != nil:
		v.fail("%s: the inclusion proof does not lead to the checkpoint's root", ProofName(i))
	default:
		return ev, true
	}
	return ev, false
}

// ReadKey reads a verifier key given as text or as a file holding it (a key in the
// note format has '+' in it; a path rarely does). The file may hold the key alone or
// the JSON answer of GET /api/v1/ledger/key.
func ReadKey(arg string, readFile func(string) ([]byte, error)) (note.Verifier, error) {
	text := strings.TrimSpace(arg)
	if strings.Count(text, "+") < 2 {
		b, err := readFile(arg)
		if err != nil {
			return nil, fmt.Errorf("verifier key: %w", err)
		}
		text = strings.TrimSpace(string(bytes.TrimPrefix(b, []byte("\xef\xbb\xbf"))))
		var answer struct {
			VerifierKey string `json:"verifier_key"`
		}
		if strings.HasPrefix(text, "{") && json.Unmarshal([]byte(text), &answer) == nil && answer.VerifierKey != "" {
			text = answer.VerifierKey
		}
	}
	return provenance.ParseVerifierKey(text)
}
