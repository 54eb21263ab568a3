// Package bundle writes and checks provenance bundles: one zip archive per data file
// holding its trace, the trace as W3C PROV-JSON, an RO-Crate 1.1 metadata file, the
// ledger events behind the trace's records with their inclusion proofs, the signed
// checkpoint they are proved against, optionally the file's bytes, and a manifest of
// every member's SHA-256. Anyone holding the facility's verifier key can check a
// bundle with no server and no database.
//
// Layout:
//
//	ro-crate-metadata.json        RO-Crate 1.1 metadata (descriptor, root Dataset, File entities)
//	prov.json                     the trace as PROV-JSON
//	trace.json                    the trace as the API answers it
//	ledger/checkpoint.txt         the signed checkpoint (C2SP tlog-checkpoint, signed note)
//	ledger/events/<index>.json    each sealed event's canonical bytes (RFC 8785), the Merkle leaf
//	ledger/proofs/<index>.json    its RFC 6962 inclusion proof against the checkpoint
//	data/<file name>              the data file's bytes, when included
//	manifest-sha256.txt           "<sha256 hex>  <member>" for every other member, sorted
//
// The package is pure: archive/zip, encoding/json and the provenance package.
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
	"slices"
	"strconv"
	"strings"
	"time"

	"beamledger/provenance"
)

// Member names of a bundle.
const (
	CrateName      = "ro-crate-metadata.json"
	ProvName       = "prov.json"
	TraceName      = "trace.json"
	CheckpointName = "ledger/checkpoint.txt"
	EventDir       = "ledger/events/"
	ProofDir       = "ledger/proofs/"
	DataDir        = "data/"
	ManifestName   = "manifest-sha256.txt"
)

// Contents is what goes into a bundle.
type Contents struct {
	Trace provenance.Trace
	// Namespace is the IRI of the product's PROV prefix.
	Namespace string
	// Published is the bundle's datePublished.
	Published time.Time
	// FileURL is where the file's bytes can be fetched, named in the crate when the
	// bytes are not included (an RO-Crate web-based data entity).
	FileURL string
	// Data, when not nil, is the data file's bytes, streamed into the archive.
	Data io.Reader
}

// ErrUnsealed is Write's refusal when the ledger cannot yet prove the file's record:
// its event is not covered by a signed checkpoint.
var ErrUnsealed = errors.New("the data file's ledger event is not yet covered by a signed checkpoint")

// member is one small member, built in memory before the archive is written.
type member struct {
	name string
	body []byte
}

// Write writes the bundle to w as a zip archive, streaming the data file's bytes:
// memory holds the small members, never the file. The manifest, written last, gives
// the data file the digest of the bytes that passed, not the one expected, so a
// store that returned other bytes is caught by the verifier.
func Write(w io.Writer, c Contents) error {
	t := c.Trace
	if !FileSealed(t) {
		return ErrUnsealed
	}
	small, err := smallMembers(c)
	if err != nil {
		return err
	}
	crate, err := json.MarshalIndent(newCrate(c, small), "", "  ")
	if err != nil {
		return err
	}
	small = append([]member{{CrateName, crate}}, small...)
	zw := zip.NewWriter(w)
	digests := map[string]string{}
	for _, m := range small {
		fw, err := zw.CreateHeader(&zip.FileHeader{Name: m.name, Method: zip.Deflate, Modified: c.Published})
		if err != nil {
			return err
		}
		if _, err := fw.Write(m.body); err != nil {
			return err
		}
		digests[m.name] = sum(m.body)
	}
	if c.Data != nil {
		// Stored, not deflated: instrument data rarely compress, and the archive's
		// member is then the file's bytes as they are.
		fw, err := zw.CreateHeader(&zip.FileHeader{Name: DataName(t.File), Method: zip.Store, Modified: c.Published})
		if err != nil {
			return err
		}
		h := sha256.New()
		if _, err := io.Copy(io.MultiWriter(fw, h), c.Data); err != nil {
			return fmt.Errorf("data file: %w", err)
		}
		digests[DataName(t.File)] = hex.EncodeToString(h.Sum(nil))
	}
	fw, err := zw.CreateHeader(&zip.FileHeader{Name: ManifestName, Method: zip.Deflate, Modified: c.Published})
	if err != nil {
		return err
	}
	if _, err := fw.Write(Manifest(digests)); err != nil {
		return err
	}
	return zw.Close()
}

// DataName is the member holding a data file's bytes: its recorded name, which has
// no directories; "." (a name the upload accepts) would name the folder itself.
func DataName(f provenance.DataFile) string {
	if f.FileName == "." || f.FileName == "" {
		return DataDir + "data-file"
	}
	return DataDir + f.FileName
}

// EventName and ProofName are the members of the sealed event at index.
func EventName(index int64) string { return EventDir + strconv.FormatInt(index, 10) + ".json" }

// ProofName is the member holding the inclusion proof of the event at index.
func ProofName(index int64) string { return ProofDir + strconv.FormatInt(index, 10) + ".json" }

// FileSealed reports whether the trace's checkpoint covers an event recording the
// file: what a bundle needs to prove the file's record.
func FileSealed(t provenance.Trace) bool {
	if t.Ledger.Checkpoint == nil {
		return false
	}
	for _, r := range t.Ledger.Records {
		if r.EntityType != provenance.EntityDataFile || r.EntityID != t.File.ID {
			continue
		}
		for _, e := range r.Events {
			if e.Sealed {
				return true
			}
		}
	}
	return false
}

// smallMembers builds every member but the crate, the data and the manifest.
func smallMembers(c Contents) ([]member, error) {
	t := c.Trace
	prov, err := json.MarshalIndent(provenance.NewProvDocument(t, c.Namespace), "", "  ")
	if err != nil {
		return nil, err
	}
	trace, err := json.MarshalIndent(t, "", "  ")
	if err != nil {
		return nil, err
	}
	out := []member{{ProvName, prov}, {TraceName, trace}, {CheckpointName, []byte(t.Ledger.Checkpoint.Note)}}
	seen := map[int64]bool{}
	for _, r := range t.Ledger.Records {
		for _, e := range r.Events {
			if !e.Sealed || e.Proof == nil || seen[*e.Index] {
				continue
			}
			seen[*e.Index] = true
			proof, err := json.MarshalIndent(e.Proof, "", "  ")
			if err != nil {
				return nil, err
			}
			out = append(out, member{EventName(*e.Index), e.Leaf}, member{ProofName(*e.Index), proof})
		}
	}
	return out, nil
}

// Manifest writes "<sha256>  <name>" lines sorted by name, the layout sha256sum
// reads, so that `sha256sum -c` checks an unpacked bundle too.
func Manifest(digests map[string]string) []byte {
	names := make([]string, 0, len(digests))
	for n := range digests {
		names = append(names, n)
	}
	slices.Sort(names)
	var b bytes.Buffer
	for _, n := range names {
		b.WriteString(digests[n] + "  " + n + "\n")
	}
	return b.Bytes()
}

// ParseManifest reads a manifest back.
func ParseManifest(b []byte) (map[string]string, error) {
	out := map[string]string{}
	for i, line := range strings.Split(strings.TrimSuffix(string(b), "\n"), "\n") {
		d, name, ok := strings.Cut(line, "  ")
		if !ok || !provenance.ValidSHA256(d) || name == "" {
			return nil, fmt.Errorf("%s line %d is not \"<sha256 hex>  <member>\"", ManifestName, i+1)
		}
		if _, dup := out[name]; dup {
			return nil, fmt.Errorf("%s names %s twice", ManifestName, name)
		}
		out[name] = d
	}
	return out, nil
}

func sum(b []byte) string {
	h := sha256.Sum256(b)
	return hex.EncodeToString(h[:])
}
