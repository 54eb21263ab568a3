package provenance_test

import (
	"bytes"
	"encoding/json"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/santhosh-tekuri/jsonschema/v6"

	"beamledger/provenance"
)

var update = flag.Bool("update", false, "rewrite golden files in testdata")

// provSchema compiles testdata/prov-json-schema.json: the JSON Schema (draft-04)
// published with the PROV-JSON W3C Member Submission of 24 April 2013, with the
// corrections listed in testdata/README.md. Draft-04 formats (uri, date-time) are
// asserted.
func provSchema(t *testing.T) *jsonschema.Schema {
	t.Helper()
	f, err := os.Open(filepath.Join("testdata", "prov-json-schema.json"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	doc, err := jsonschema.UnmarshalJSON(f)
	if err != nil {
		t.Fatal(err)
	}
	c := jsonschema.NewCompiler()
	const url = "http://provenance.ecs.soton.ac.uk/prov-json/schema"
	if err := c.AddResource(url, doc); err != nil {
		t.Fatal(err)
	}
	s, err := c.Compile(url)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func validate(t *testing.T, s *jsonschema.Schema, doc []byte) error {
	t.Helper()
	v, err := jsonschema.UnmarshalJSON(bytes.NewReader(doc))
	if err != nil {
		t.Fatal(err)
	}
	return s.Validate(v)
}

func provJSON(t *testing.T, tr provenance.Trace) []byte {
	t.Helper()
	b, err := json.MarshalIndent(provenance.NewProvDocument(tr, "https://ledger.facility.example/prov#"), "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	return append(b, '\n')
}

// TestProvDocumentValidates checks the exported trace against the published PROV-JSON
// schema [published: W3C Member Submission PROV-JSON, 24 April 2013, its JSON
// Schema, corrected as testdata/README.md says], and against a golden copy.
func TestProvDocumentValidates(t *testing.T) {
	s := provSchema(t)
	tr := sampleTrace()
	doc := provJSON(t, tr)
	if err := validate(t, s, doc); err != nil {
		t.Fatalf("the PROV-JSON document does not validate: %v", err)
	}
	// A processed file without an acquisition, and a trace with nothing upstream or
	// down, validate too.
	bare := tr
	bare.Acquisition, bare.Booking, bare.Instrument, bare.Specimen, bare.Tuning = nil, nil, nil, nil, nil
	bare.Calibrations, bare.Downstream, bare.Files, bare.People = nil, nil, nil, nil
	if err := validate(t, s, provJSON(t, bare)); err != nil {
		t.Errorf("a bare trace's document does not validate: %v", err)
	}
	golden := filepath.Join("testdata", "trace.prov.json")
	if *update {
		if err := os.WriteFile(golden, doc, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(doc, want) {
		t.Errorf("the document departs from %s (run with -update after checking the change)", golden)
	}
}

// TestProvSchemaRefusesBrokenDocuments: the validation is able to fail. Each
// document breaks one rule of the schema [published: PROV-JSON schema]; the last
// two are the cases the corrections are about.
func TestProvSchemaRefusesBrokenDocuments(t *testing.T) {
	s := provSchema(t)
	var good map[string]any
	if err := json.Unmarshal(provJSON(t, sampleTrace()), &good); err != nil {
		t.Fatal(err)
	}
	for name, breakIt := range map[string]func(d map[string]any){
		"generation without prov:entity": func(d map[string]any) {
			for _, r := range d["wasGeneratedBy"].(map[string]any) {
				delete(r.(map[string]any), "prov:entity")
				return
			}
		},
		"attribution without prov:agent": func(d map[string]any) {
			for _, r := range d["wasAttributedTo"].(map[string]any) {
				delete(r.(map[string]any), "prov:agent")
				return
			}
		},
		"an attribute that is an object": func(d map[string]any) {
			for _, e := range d["entity"].(map[string]any) {
				e.(map[string]any)["beamledger:nested"] = map[string]any{"a": 1}
				return
			}
		},
		"a typed literal without $": func(d map[string]any) {
			for _, e := range d["agent"].(map[string]any) {
				e.(map[string]any)["prov:type"] = map[string]any{"type": "prov:QUALIFIED_NAME"}
				return
			}
		},
		"an unknown top-level key": func(d map[string]any) { d["wasEndedby"] = map[string]any{} },
		"an activity end time that is no date-time": func(d map[string]any) {
			for _, a := range d["activity"].(map[string]any) {
				a.(map[string]any)["prov:endTime"] = "yesterday"
				return
			}
		},
	} {
		t.Run(name, func(t *testing.T) {
			var d map[string]any
			b, _ := json.Marshal(good)
			_ = json.Unmarshal(b, &d)
			breakIt(d)
			broken, _ := json.Marshal(d)
			if err := validate(t, s, broken); err == nil {
				t.Errorf("the schema accepted a document with %s", name)
			}
		})
	}
	// The corrected spelling is accepted: a document with an end is valid PROV-JSON.
	d := map[string]any{"prefix": map[string]any{"ex": "https://example.org/"},
		"wasEndedBy": map[string]any{"_:e1": map[string]any{"prov:activity": "ex:a1"}}}
	b, _ := json.Marshal(d)
	if err := validate(t, s, b); err != nil {
		t.Errorf("wasEndedBy refused: %v", err)
	}
}

// TestProvFileDigest reads the file's digest back out of a document, as the bundle
// verifier does.
func TestProvFileDigest(t *testing.T) {
	tr := sampleTrace()
	doc := provJSON(t, tr)
	got, err := provenance.ProvFileDigest(doc, tr.File.ID)
	// [published: FIPS 180-4 examples] SHA-256("abc"), the digest the sample file carries.
	if err != nil || got != "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad" {
		t.Errorf("digest = %q, %v", got, err)
	}
	if _, err := provenance.ProvFileDigest(doc, "nope"); err == nil || !strings.Contains(err.Error(), "no entity") {
		t.Errorf("unknown file: %v", err)
	}
}
