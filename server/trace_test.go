package server

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"net/http"
	"os"
	"strings"
	"testing"

	"github.com/santhosh-tekuri/jsonschema/v6"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/provenance/bundle"
)

// traceWorld is a raw file on the researcher's acquisition, a processed file of the
// same project derived from it, and a processed file of the foreign project that
// staff derived from it too.
type traceWorld struct {
	raw, out, foreign provenance.DataFile
	rawBytes          []byte
}

func newTraceWorld(w *world) traceWorld {
	w.t.Helper()
	researcher, staff := w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleStaff]
	acq := testAcquisition(w)
	tw := traceWorld{rawBytes: []byte("trace raw frame " + acq)}
	w.upload("/api/v1/files?acquisition_id="+acq+"&name=frame.raw", researcher, tw.rawBytes, nil, &tw.raw)
	w.upload("/api/v1/files?project_id="+w.own.ID+"&name=aligned.tif", researcher, []byte("trace aligned "+acq), nil, &tw.out)
	w.upload("/api/v1/files?project_id="+w.foreign.ID+"&name=theirs.tif", staff, []byte("trace theirs "+acq), nil, &tw.foreign)
	for _, out := range []provenance.DataFile{tw.out, tw.foreign} {
		w.expect(http.StatusCreated, http.MethodPost, "/api/v1/derivations", staff, map[string]any{"output_file_id": out.ID, "input_file_ids": []string{tw.raw.ID},
			"software": "drift-align", "software_version": "2.3.1", "performed_at": w.clock.Now()}, nil)
	}
	return tw
}

// verifierKey fetches the ledger's public key as a client would.
func (w *world) verifierKey() string {
	w.t.Helper()
	var k ledgerKeyAnswer
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/ledger/key", "", nil, &k)
	return k.VerifierKey
}

func TestTraceByDigest(t *testing.T) {
	w := newWorld(t)
	tw := newTraceWorld(w)
	auditor, researcher := w.tokens[accounts.RoleAuditor], w.tokens[accounts.RoleResearcher]
	path := "/api/v1/trace/" + tw.raw.SHA256

	// Before any seal: every event is shown unsealed, with no proof, and no bundle can
	// prove the file yet.
	var tr provenance.Trace
	w.expect(http.StatusOK, http.MethodGet, path, auditor, nil, &tr)
	if tr.Ledger.Checkpoint != nil || len(tr.Ledger.Records) == 0 || tr.Ledger.Records[0].Events[0].Sealed || tr.Ledger.Records[0].Events[0].Proof != nil {
		t.Errorf("unsealed trace: checkpoint %v, records %+v", tr.Ledger.Checkpoint, tr.Ledger.Records)
	}
	w.expect(http.StatusConflict, http.MethodGet, path+"/bundle", auditor, nil, nil)

	if _, err := w.srv.signCheckpoint(context.Background()); err != nil {
		t.Fatal(err)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/trace/"+strings.ToUpper(tw.raw.SHA256), auditor, nil, &tr) // the digest in upper case too
	if tr.File.ID != tw.raw.ID || tr.Acquisition == nil || tr.Booking == nil || tr.Instrument == nil || tr.Operator == nil || len(tr.Downstream) != 2 || len(tr.Files) != 2 {
		t.Fatalf("trace: file %s, acquisition %v, %d downstream, %d files", tr.File.ID, tr.Acquisition, len(tr.Downstream), len(tr.Files))
	}
	v, err := provenance.ParseVerifierKey(w.verifierKey())
	if err != nil {
		t.Fatal(err)
	}
	cp, err := provenance.OpenCheckpoint([]byte(tr.Ledger.Checkpoint.Note), v)
	if err != nil || tr.Ledger.KeyName != v.Name() {
		t.Fatalf("checkpoint %v, key name %q", err, tr.Ledger.KeyName)
	}
	events := map[string]int{}
	for _, r := range tr.Ledger.Records {
		for _, e := range r.Events {
			events[r.EntityType]++
			if !e.Sealed || e.Proof == nil || e.Proof.Root != cp.Root || e.Proof.LeafHash != e.LeafHash() || e.Proof.Check() != nil {
				t.Errorf("%s %s: event not proved against the checkpoint", r.EntityType, r.EntityID)
			}
		}
	}
	// The file and the two outputs, the acquisition, the two derivations. (The test
	// booking is inserted past the rules and the ledger, so it has none.)
	if events["data_file"] != 3 || events["acquisition"] != 1 || events["derivation"] != 2 {
		t.Errorf("events in the trace: %v", events)
	}

	// The researcher traces the file of their project but sees only their files.
	var mine provenance.Trace
	w.expect(http.StatusOK, http.MethodGet, path, researcher, nil, &mine)
	if len(mine.Files) != 1 || mine.Files[0].ID != tw.out.ID || len(mine.Downstream) != 2 {
		t.Errorf("researcher's trace: files %v, %d downstream", mine.Files, len(mine.Downstream))
	}
	for _, r := range mine.Ledger.Records {
		if r.EntityID == tw.foreign.ID {
			t.Errorf("the researcher sees the foreign file's events")
		}
	}
	// Someone outside the project is told the file does not exist, in the words an
	// unknown digest gets; a malformed digest names the field.
	other := w.login(w.other.Email, testPassword).AccessToken
	hidden := w.expect(http.StatusNotFound, http.MethodGet, path, other, nil, nil)
	unknown := w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/trace/"+strings.Repeat("0", 64), auditor, nil, nil)
	if hidden.errorMessage() != unknown.errorMessage() || !strings.Contains(unknown.errorMessage(), "SHA-256") {
		t.Errorf("hidden %q, unknown %q", hidden.errorMessage(), unknown.errorMessage())
	}
	if r := w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/trace/xyz", auditor, nil, nil); !fieldNamed(r, "sha256") {
		t.Errorf("malformed digest: %s", r.Body)
	}
	w.expect(http.StatusForbidden, http.MethodGet, path, w.agent, nil, nil)

	// The same bytes recorded again as a processed file: the first record is traced,
	// the other listed, and file_id picks it.
	var again provenance.DataFile
	w.upload("/api/v1/files?project_id="+w.own.ID+"&name=copy.raw", researcher, tw.rawBytes, nil, &again)
	var first, picked provenance.Trace
	w.expect(http.StatusOK, http.MethodGet, path, researcher, nil, &first)
	w.expect(http.StatusOK, http.MethodGet, path+"?file_id="+again.ID, researcher, nil, &picked)
	if first.File.ID != tw.raw.ID || len(first.OtherRecords) != 1 || first.OtherRecords[0] != again.ID || picked.File.ID != again.ID || picked.Acquisition != nil {
		t.Errorf("records of the same bytes: first %s (others %v), picked %s", first.File.ID, first.OtherRecords, picked.File.ID)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodGet, path+"?file_id="+tw.out.ID, researcher, nil, nil); !fieldNamed(r, "file_id") {
		t.Errorf("file_id of other bytes: %s", r.Body)
	}

	// By the bytes: the same trace.
	var byBytes provenance.Trace
	if r := w.upload("/api/v1/trace", researcher, tw.rawBytes, nil, &byBytes); r.StatusCode != http.StatusOK || byBytes.File.ID != tw.raw.ID {
		t.Errorf("trace by bytes: %d %s", r.StatusCode, r.Body)
	}
	if r := w.upload("/api/v1/trace", researcher, []byte("never uploaded"), nil, nil); r.StatusCode != http.StatusNotFound {
		t.Errorf("unknown bytes: %d", r.StatusCode)
	}
}

// errorMessage extracts error.message from an error answer.
func (r response) errorMessage() string {
	var e errorBody
	_ = json.Unmarshal(r.Body, &e)
	return e.Error.Message
}

// TestTraceProvValidates holds the served PROV-JSON to the published schema kept in
// provenance/testdata [published: PROV-JSON W3C Member Submission, 24 April 2013,
// its JSON Schema, corrected as provenance/testdata/README.md says].
func TestTraceProvValidates(t *testing.T) {
	w := newWorld(t)
	tw := newTraceWorld(w)
	r := w.expect(http.StatusOK, http.MethodGet, "/api/v1/trace/"+tw.raw.SHA256+"/prov", w.tokens[accounts.RoleAuditor], nil, nil)
	f, err := os.Open("../provenance/testdata/prov-json-schema.json")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	schemaDoc, err := jsonschema.UnmarshalJSON(f)
	if err != nil {
		t.Fatal(err)
	}
	c := jsonschema.NewCompiler()
	if err := c.AddResource("prov-json-schema.json", schemaDoc); err != nil {
		t.Fatal(err)
	}
	s, err := c.Compile("prov-json-schema.json")
	if err != nil {
		t.Fatal(err)
	}
	doc, err := jsonschema.UnmarshalJSON(bytes.NewReader(r.Body))
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Validate(doc); err != nil {
		t.Errorf("served PROV-JSON does not validate: %v", err)
	}
	if d, err := provenance.ProvFileDigest(r.Body, tw.raw.ID); err != nil || d != tw.raw.SHA256 {
		t.Errorf("file digest in the document: %q %v", d, err)
	}
	for _, rel := range []string{"wasGeneratedBy", "used", "wasAssociatedWith", "wasDerivedFrom", "wasAttributedTo", "actedOnBehalfOf", "wasInformedBy"} {
		if !bytes.Contains(r.Body, []byte(`"`+rel+`"`)) {
			t.Errorf("the document has no %s", rel)
		}
	}
}

// TestTraceBundleVerifies downloads bundles with and without the file's bytes and
// checks them offline with the key the server publishes.
func TestTraceBundleVerifies(t *testing.T) {
	w := newWorld(t)
	tw := newTraceWorld(w)
	if _, err := w.srv.signCheckpoint(context.Background()); err != nil {
		t.Fatal(err)
	}
	key, err := bundle.ReadKey(w.verifierKey(), os.ReadFile)
	if err != nil {
		t.Fatal(err)
	}
	path := "/api/v1/trace/" + tw.raw.SHA256 + "/bundle"
	for _, c := range []struct {
		query    string
		withData bool
	}{{"", true}, {"?include_file=false", false}, {"?include_file=true", true}} {
		r := w.get(path+c.query, w.tokens[accounts.RoleResearcher], nil)
		if r.StatusCode != http.StatusOK || r.Header.Get("Content-Type") != "application/zip" {
			t.Fatalf("bundle%s: %d %s", c.query, r.StatusCode, r.Body)
		}
		s, err := bundle.Verify(bytes.NewReader(r.Body), int64(len(r.Body)), key)
		sum := sha256.Sum256(tw.rawBytes)
		if err != nil || s.DataIncluded != c.withData || s.SHA256 != hex.EncodeToString(sum[:]) || s.FileID != tw.raw.ID {
			t.Errorf("bundle%s: %+v, %v", c.query, s, err)
		}
	}
	if r := w.expect(http.StatusBadRequest, http.MethodGet, path+"?include_file=maybe", w.tokens[accounts.RoleAuditor], nil, nil); !fieldNamed(r, "include_file") {
		t.Errorf("include_file=maybe: %s", r.Body)
	}
}

// exerciseTrace covers the trace routes for TestOpenAPIExamplesExercise.
func exerciseTrace(t *testing.T, w *world) {
	auditor := w.tokens[accounts.RoleAuditor]
	tw := newTraceWorld(w)
	path := "/api/v1/trace/" + tw.raw.SHA256
	w.expect(http.StatusConflict, http.MethodGet, path+"/bundle", auditor, nil, nil)
	if _, err := w.srv.signCheckpoint(context.Background()); err != nil {
		t.Fatal(err)
	}
	w.expect(http.StatusOK, http.MethodGet, path, auditor, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/trace/abc", auditor, nil, nil)
	if r := w.upload("/api/v1/trace", auditor, tw.rawBytes, nil, nil); r.StatusCode != http.StatusOK {
		t.Errorf("trace by bytes: %d", r.StatusCode)
	}
	w.upload("/api/v1/trace", auditor, []byte("no such bytes"), nil, nil)
	w.expect(http.StatusOK, http.MethodGet, path+"/prov", auditor, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/trace/"+strings.Repeat("e", 64)+"/prov", auditor, nil, nil)
	if r := w.get(path+"/bundle", auditor, nil); r.StatusCode != http.StatusOK {
		t.Errorf("bundle: %d", r.StatusCode)
	}
}
