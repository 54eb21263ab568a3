package provenance

import (
	"context"
	"slices"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// A trace is everything that explains one data file, gathered for an auditor who
// starts from the bytes: the file's record, the acquisition that produced it (every
// version, the one in force first), the tuning and calibrations in force then, the
// booking, instrument, project, people and specimen, the derivations up to raw data
// and down to what was made from it, and, for each of those records, the ledger
// events that recorded it with their inclusion proofs against a signed checkpoint.

// Trace is the whole story of one data file.
type Trace struct {
	// SHA256 is the digest the trace was asked for (lower-case hex).
	SHA256 string   `json:"sha256"`
	File   DataFile `json:"file"`
	// OtherRecords names other records of the same bytes (uploaded to another
	// acquisition or project) that the caller may read; each has its own trace.
	OtherRecords []string `json:"other_records"`
	// Acquisition is nil for a processed file, which belongs to a project only.
	Acquisition *TraceAcquisition      `json:"acquisition"`
	Booking     *scheduling.Booking    `json:"booking"`
	Instrument  *scheduling.Instrument `json:"instrument"`
	Project     accounts.Project       `json:"project"`
	// Operator ran the instrument for the acquisition; BookedUser held the booking.
	Operator   *TracePerson   `json:"operator"`
	BookedUser *TracePerson   `json:"booked_user"`
	Specimen   *TraceSpecimen `json:"specimen"`
	// Tuning and Calibrations are those the acquisition's version in force names.
	Tuning       *Tuning       `json:"tuning"`
	Calibrations []Calibration `json:"calibrations"`
	// Upstream are the derivations the file came out of, back to raw files;
	// Downstream those that used it, directly or not. Files holds the records of the
	// files they connect (those the caller may read).
	Upstream   []Derivation `json:"upstream"`
	Downstream []Derivation `json:"downstream"`
	Files      []DataFile   `json:"files"`
	// People names the operators of the derivations and the acquisition.
	People []TracePerson `json:"people"`
	Ledger TraceLedger   `json:"ledger"`
}

// TraceAcquisition is an acquisition at its version in force (the newest: a
// correction supersedes what it corrects) with every version, oldest first.
type TraceAcquisition struct {
	Acquisition
	Versions []AcquisitionVersion `json:"versions"`
}

// TracePerson is what a trace says of a person: enough to name them, no more.
type TracePerson struct {
	ID          string        `json:"id"`
	DisplayName string        `json:"display_name"`
	ORCID       string        `json:"orcid,omitempty"`
	Role        accounts.Role `json:"role"`
}

// PersonOf keeps the parts of a user a trace shows.
func PersonOf(u accounts.User) TracePerson {
	return TracePerson{ID: u.ID, DisplayName: u.DisplayName, ORCID: u.ORCID, Role: u.Role}
}

// TraceSpecimen is the specimen with the fluence it had taken before the
// acquisition began and after it: before sums the acquisitions on it that started
// earlier (each at its version in force), after adds this acquisition's fluence.
type TraceSpecimen struct {
	Specimen
	FluenceBeforeEPerA2 float64 `json:"fluence_before_e_per_angstrom2"`
	FluenceAfterEPerA2  float64 `json:"fluence_after_e_per_angstrom2"`
	// OverBudgetAfter says whether the acquisition left it past its budget.
	OverBudgetAfter bool `json:"over_budget_after"`
}

// NewTraceSpecimen computes the fluence before and after an acquisition that gave
// the specimen fluence e⁻/Å² (nil when the conditions gave none).
func NewTraceSpecimen(s Specimen, beforeEPerA2 float64, fluence *float64) *TraceSpecimen {
	t := &TraceSpecimen{Specimen: s, FluenceBeforeEPerA2: beforeEPerA2, FluenceAfterEPerA2: beforeEPerA2}
	if fluence != nil {
		t.FluenceAfterEPerA2 += *fluence
	}
	t.OverBudgetAfter = s.FluenceBudgetEPerA2 != nil && t.FluenceAfterEPerA2 > *s.FluenceBudgetEPerA2
	return t
}

// TraceLedger is the ledger's word on the trace's records: their events with
// proofs, and the signed checkpoint the proofs are against.
type TraceLedger struct {
	// Checkpoint is the latest signed checkpoint; nil before the first.
	Checkpoint *Checkpoint `json:"checkpoint"`
	// KeyName is the name of the key that signs checkpoints (the ledger's origin),
	// and VerifierKey the key itself in the note format, when the server has one.
	KeyName     string        `json:"key_name"`
	VerifierKey string        `json:"verifier_key,omitempty"`
	Records     []TraceRecord `json:"records"`
}

// TraceRecord is one record of the trace with the events that recorded it.
type TraceRecord struct {
	EntityType string       `json:"entity_type"`
	EntityID   string       `json:"entity_id"`
	Events     []TraceEvent `json:"events"`
}

// TraceEvent is a ledger event with its place in the checkpoint's tree. Sealed is
// true when the checkpoint covers the event (its index is below the checkpoint's
// size) and Proof then proves it; an event not yet covered is shown unsealed, with
// no proof, since nothing signed commits to it yet.
type TraceEvent struct {
	LedgerEvent
	Sealed bool            `json:"sealed"`
	Proof  *InclusionProof `json:"proof"`
}

// TraceRef names a record whose ledger events belong in a trace.
type TraceRef struct {
	EntityType string
	EntityID   string
}

// Refs lists the records of the trace that the ledger records, once each, in the
// order a reader meets them: the file, its acquisition, booking, specimen, tuning,
// calibrations, then derivations and the other files.
func (t *Trace) Refs() []TraceRef {
	var out []TraceRef
	add := func(typ, id string) {
		r := TraceRef{typ, id}
		if id != "" && !slices.Contains(out, r) {
			out = append(out, r)
		}
	}
	add(EntityDataFile, t.File.ID)
	if t.Acquisition != nil {
		add(EntityAcquisition, t.Acquisition.ID)
	}
	if t.Booking != nil {
		add(EntityBooking, t.Booking.ID)
	}
	if t.Specimen != nil {
		add(EntitySpecimen, t.Specimen.ID)
	}
	if t.Tuning != nil {
		add(EntityTuning, t.Tuning.ID)
	}
	for _, c := range t.Calibrations {
		add(EntityCalibration, c.ID)
	}
	for _, d := range append(slices.Clone(t.Upstream), t.Downstream...) {
		add(EntityDerivation, d.ID)
	}
	for _, f := range t.Files {
		add(EntityDataFile, f.ID)
	}
	return out
}

// SplitLineage divides a lineage's derivations into those upstream of fileID (its
// producer and, recursively, its inputs' producers) and the rest, which are
// downstream of it. Both keep the lineage's order.
func SplitLineage(l Lineage, fileID string) (upstream, downstream []Derivation) {
	up := map[string]bool{fileID: true}
	for _, id := range l.Ancestors(fileID) {
		up[id] = true
	}
	upstream, downstream = []Derivation{}, []Derivation{}
	for _, d := range l.Derivations {
		if up[d.OutputFileID] {
			upstream = append(upstream, d)
		} else {
			downstream = append(downstream, d)
		}
	}
	return upstream, downstream
}

// TraceStore gathers traces.
type TraceStore interface {
	// FilesByDigest lists the stored records of the bytes with this SHA-256 (hex):
	// records of acquisitions first, then processed files, each oldest first;
	// limited to the given projects when projectIDs is not nil. An empty list when
	// none.
	FilesByDigest(ctx context.Context, sha256Hex string, projectIDs []string) ([]DataFile, error)
	// Trace gathers the trace of the stored data-file record fileID, its ledger
	// events with proofs against the latest checkpoint. ErrNotFound when there is
	// no such stored record.
	Trace(ctx context.Context, fileID string) (Trace, error)
}
