package bundle

import (
	"encoding/json"
	"fmt"
	"strconv"
	"strings"
	"time"
)

// RO-Crate 1.1 (researchobject.org/ro-crate/specification/1.1): a flat JSON-LD
// @graph with the metadata descriptor, the root Dataset and one data entity per
// file of the crate.
const (
	crateContext    = "https://w3id.org/ro/crate/1.1/context"
	crateConformsTo = "https://w3id.org/ro/crate/1.1"
	// provJSONSpec identifies the PROV-JSON format the prov.json member conforms to.
	provJSONSpec = "https://www.w3.org/Submission/2013/SUBM-prov-json-20130424/"
	// termsID names the contextual entity for the bundle's terms of use.
	termsID = "#terms-of-use"
)

type ref struct {
	ID string `json:"@id"`
}

// crate is the whole metadata document.
type crate struct {
	Context string `json:"@context"`
	Graph   []any  `json:"@graph"`
}

// crateFile is a File data entity.
type crateFile struct {
	ID             string `json:"@id"`
	Type           string `json:"@type"`
	Name           string `json:"name"`
	EncodingFormat string `json:"encodingFormat"`
	SHA256         string `json:"sha256"`
	// ContentSize is text in schema.org; RO-Crate examples give the byte count.
	ContentSize string `json:"contentSize"`
	Identifier  string `json:"identifier,omitempty"`
	ConformsTo  *ref   `json:"conformsTo,omitempty"`
}

// newCrate describes the bundle: its root Dataset has the data file as mainEntity
// and every member but the metadata and the manifest (written after it) in hasPart.
func newCrate(c Contents, small []member) crate {
	t := c.Trace
	f := t.File
	dataID := c.FileURL
	if c.Data != nil {
		dataID = DataName(f)
	}
	data := crateFile{ID: dataID, Type: "File", Name: f.FileName, EncodingFormat: f.MediaType, SHA256: f.SHA256,
		ContentSize: strconv.FormatInt(f.SizeBytes, 10), Identifier: "urn:uuid:" + f.ID}
	parts := []ref{{dataID}}
	graph := []any{
		map[string]any{"@id": CrateName, "@type": "CreativeWork", "conformsTo": ref{crateConformsTo}, "about": ref{"./"}},
		nil, // the root, once hasPart is known
		data,
	}
	for _, m := range small {
		cf := crateFile{ID: m.name, Type: "File", Name: memberTitle(m.name), EncodingFormat: "application/json",
			SHA256: sum(m.body), ContentSize: strconv.Itoa(len(m.body))}
		switch {
		case m.name == ProvName:
			cf.ConformsTo = &ref{provJSONSpec}
		case m.name == CheckpointName:
			cf.EncodingFormat = "text/plain"
		}
		graph = append(graph, cf)
		parts = append(parts, ref{m.name})
	}
	graph[1] = map[string]any{
		"@id": "./", "@type": "Dataset",
		"name":          "Provenance of " + f.FileName,
		"description":   fmt.Sprintf("The trace of data file %s (SHA-256 %s): the acquisition, conditions, tuning, calibrations, booking, people, specimen and derivations behind it, as W3C PROV-JSON, with the ledger events that recorded them and their inclusion proofs against a signed checkpoint.", f.ID, f.SHA256),
		"datePublished": c.Published.UTC().Format(time.RFC3339),
		"license":       ref{termsID},
		"mainEntity":    ref{dataID},
		"hasPart":       parts,
	}
	graph = append(graph, map[string]any{"@id": termsID, "@type": "CreativeWork", "name": "Terms of the issuing facility",
		"description": "This bundle and the data it describes are shared under the data policy of the facility that issued it; ask the facility for its terms before reuse."})
	return crate{Context: crateContext, Graph: graph}
}

// memberTitle names a member for people reading the crate.
func memberTitle(name string) string {
	switch {
	case name == ProvName:
		return "Trace as W3C PROV-JSON"
	case name == TraceName:
		return "Trace as answered by the server"
	case name == CheckpointName:
		return "Signed ledger checkpoint"
	case strings.HasPrefix(name, EventDir):
		return "Ledger event " + strings.TrimSuffix(strings.TrimPrefix(name, EventDir), ".json") + " (RFC 8785 canonical JSON)"
	case strings.HasPrefix(name, ProofDir):
		return "Inclusion proof of ledger event " + strings.TrimSuffix(strings.TrimPrefix(name, ProofDir), ".json")
	}
	return name
}

// crateMain reads a crate back: the main entity's id, file record id, digest and
// size, after checking the parts RO-Crate 1.1 requires.
func crateMain(b []byte) (id, fileID, digest string, size int64, err error) {
	var c struct {
		Context any              `json:"@context"`
		Graph   []map[string]any `json:"@graph"`
	}
	if err := json.Unmarshal(b, &c); err != nil {
		return "", "", "", 0, fmt.Errorf("%s is not JSON: %w", CrateName, err)
	}
	if c.Context != crateContext {
		return "", "", "", 0, fmt.Errorf("%s: @context is not %s", CrateName, crateContext)
	}
	byID := map[string]map[string]any{}
	for _, e := range c.Graph {
		if s, ok := e["@id"].(string); ok {
			byID[s] = e
		}
	}
	desc, root := byID[CrateName], byID["./"]
	if desc == nil || idOf(desc["about"]) != "./" || idOf(desc["conformsTo"]) != crateConformsTo {
		return "", "", "", 0, fmt.Errorf("%s: no metadata descriptor about ./ conforming to %s", CrateName, crateConformsTo)
	}
	if root == nil || root["@type"] != "Dataset" {
		return "", "", "", 0, fmt.Errorf("%s: no root Dataset ./", CrateName)
	}
	for _, k := range []string{"name", "description", "datePublished", "license", "hasPart"} {
		if root[k] == nil {
			return "", "", "", 0, fmt.Errorf("%s: the root Dataset has no %s", CrateName, k)
		}
	}
	id = idOf(root["mainEntity"])
	main := byID[id]
	if main == nil || main["@type"] != "File" {
		return "", "", "", 0, fmt.Errorf("%s: the root Dataset's mainEntity is not a File", CrateName)
	}
	digest, _ = main["sha256"].(string)
	fileID, _ = main["identifier"].(string)
	sizeText, _ := main["contentSize"].(string)
	if size, err = strconv.ParseInt(sizeText, 10, 64); err != nil {
		return "", "", "", 0, fmt.Errorf("%s: the data file's contentSize %q is not a byte count", CrateName, sizeText)
	}
	return id, strings.TrimPrefix(fileID, "urn:uuid:"), digest, size, nil
}

func idOf(v any) string {
	m, _ := v.(map[string]any)
	s, _ := m["@id"].(string)
	return s
}
