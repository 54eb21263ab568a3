package provenance

import (
	"bytes"
	"context"
	"encoding/json"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
	"beamledger/accounts"
)

// Derivation is one processing step: input files, the software (name and version)
// and parameters that turned them into an output file, who ran it and when. A file
// is the output of at most one derivation; the derivations form a file's lineage,
// which has no cycles.
type Derivation struct {
	ID              string          `json:"id"`
	ProjectID       string          `json:"project_id"`
	OutputFileID    string          `json:"output_file_id"`
	InputFileIDs    []string        `json:"input_file_ids"`
	Software        string          `json:"software"`
	SoftwareVersion string          `json:"software_version"`
	Parameters      json.RawMessage `json:"parameters"`
	OperatorID      string          `json:"operator_id"`
	PerformedAt     time.Time       `json:"performed_at"`
	Notes           string          `json:"notes"`
	RecordedBy      string          `json:"recorded_by"`
	CreatedAt       time.Time       `json:"created_at"`
}

// NewDerivation is what a client sends to record a processing step.
type NewDerivation struct {
	OutputFileID    string          `json:"output_file_id"`
	InputFileIDs    []string        `json:"input_file_ids"`
	Software        string          `json:"software"`
	SoftwareVersion string          `json:"software_version"`
	Parameters      json.RawMessage `json:"parameters"`
	OperatorID      string          `json:"operator_id"`
	PerformedAt     time.Time       `json:"performed_at"`
	Notes           string          `json:"notes"`
	RecordedBy      string          `json:"-"`
}

// maxDerivationInputs bounds one step's inputs: a tomographic tilt series is about
// 150 images, and a larger set belongs in an archive file of its own.
const maxDerivationInputs = 1000

// maxParameterBytes bounds the parameters object: processing settings are a few KiB.
const maxParameterBytes = 64 << 10

// Normalize checks the input in place.
func (n *NewDerivation) Normalize() error {
	fe := beamledger.FieldErrors{}
	if !accounts.ValidID(n.OutputFileID) {
		fe.Add("output_file_id", "must be a data file id")
	}
	switch {
	case len(n.InputFileIDs) == 0:
		fe.Add("input_file_ids", "name at least one input file")
	case len(n.InputFileIDs) > maxDerivationInputs:
		fe.Add("input_file_ids", "at most 1000 input files")
	}
	seen := map[string]bool{}
	for _, id := range n.InputFileIDs {
		switch {
		case !accounts.ValidID(id):
			fe.Add("input_file_ids", "each must be a data file id")
		case seen[id]:
			fe.Add("input_file_ids", "names "+id+" twice")
		case id == n.OutputFileID:
			fe.Add("input_file_ids", "the output cannot be its own input")
		}
		seen[id] = true
	}
	n.Software, n.SoftwareVersion = strings.TrimSpace(n.Software), strings.TrimSpace(n.SoftwareVersion)
	if n.Software == "" || utf8.RuneCountInString(n.Software) > 200 {
		fe.Add("software", "is required: the program's name (at most 200 characters)")
	}
	if n.SoftwareVersion == "" || utf8.RuneCountInString(n.SoftwareVersion) > 100 {
		fe.Add("software_version", "is required: the exact version, so the step can be repeated (at most 100 characters)")
	}
	p := bytes.TrimSpace(n.Parameters)
	switch {
	case len(p) == 0 || string(p) == "null":
		n.Parameters = json.RawMessage("{}")
	case len(p) > maxParameterBytes:
		fe.Add("parameters", "must be at most 64 KiB of JSON")
	case p[0] != '{':
		fe.Add("parameters", "must be a JSON object")
	}
	if n.OperatorID != "" && !accounts.ValidID(n.OperatorID) {
		fe.Add("operator_id", "must be a user id")
	}
	if n.PerformedAt.IsZero() {
		fe.Add("performed_at", "is required (RFC 3339)")
	}
	n.Notes = strings.TrimSpace(n.Notes)
	if utf8.RuneCountInString(n.Notes) > 4000 {
		fe.Add("notes", "is too long (at most 4000 characters)")
	}
	return fe.Err()
}

// Lineage is the part of the file graph connected to one file: every file it was
// derived from and every file derived from it, with the derivations between them.
type Lineage struct {
	FileID      string       `json:"file_id"`
	Files       []DataFile   `json:"files"`
	Derivations []Derivation `json:"derivations"`
}

// Ancestors returns the ids of the files id was derived from, directly or not, in
// the order a breadth-first walk meets them.
func (l Lineage) Ancestors(id string) []string {
	producer := map[string]Derivation{}
	for _, d := range l.Derivations {
		producer[d.OutputFileID] = d
	}
	var out []string
	queue := []string{id}
	seen := map[string]bool{id: true}
	for len(queue) > 0 {
		cur := queue[0]
		queue = queue[1:]
		d, ok := producer[cur]
		if !ok {
			continue
		}
		for _, in := range d.InputFileIDs {
			if !seen[in] {
				seen[in] = true
				out = append(out, in)
				queue = append(queue, in)
			}
		}
	}
	return out
}

// DerivationStore persists derivations.
type DerivationStore interface {
	// RecordDerivation stores a processing step. ErrInvalid naming the field when a
	// file does not exist or is not stored; ErrConflict when the output already has a
	// derivation; a rule violation "lineage_cycle" when the output is among the
	// inputs' ancestors.
	RecordDerivation(ctx context.Context, n NewDerivation, now time.Time) (Derivation, error)
	// Lineage returns the graph connected to a file. ErrNotFound when there is none.
	Lineage(ctx context.Context, fileID string) (Lineage, error)
}
