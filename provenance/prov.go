package provenance

import (
	"encoding/json"
	"fmt"
	"strconv"
	"time"
)

// A trace is exported as a W3C PROV-JSON document (Member Submission, 24 April
// 2013): the files, the acquisition record, the specimen, tuning and calibrations
// are entities; the acquisition session and the derivations are activities; the
// people, the project and the instrument are agents; and the relations between them
// are the PROV-DM ones an auditor asks about (generation, usage, association,
// derivation, attribution, delegation, communication). Names are qualified names
// in the product's own namespace, prefix ProvPrefix.

// ProvPrefix is the prefix of the product's own PROV namespace.
const ProvPrefix = "beamledger"

// ProvAttrs are the attributes of one PROV-JSON record: strings, numbers, booleans,
// typed literals (ProvLiteral) or arrays of them.
type ProvAttrs map[string]any

// ProvLiteral is a PROV-JSON typed literal, {"$": value, "type": datatype}.
type ProvLiteral struct {
	Value string `json:"$"`
	Type  string `json:"type"`
}

// qname is a qualified-name literal, the form prov:type values take.
func qname(q string) ProvLiteral { return ProvLiteral{Value: q, Type: "prov:QUALIFIED_NAME"} }

// dateTime is an xsd:dateTime literal in UTC.
func dateTime(t time.Time) ProvLiteral {
	return ProvLiteral{Value: t.UTC().Format(time.RFC3339Nano), Type: "xsd:dateTime"}
}

// ProvDocument is a PROV-JSON document with the record kinds a trace uses. Empty
// kinds are left out.
type ProvDocument struct {
	Prefix            map[string]string    `json:"prefix"`
	Entity            map[string]ProvAttrs `json:"entity,omitempty"`
	Activity          map[string]ProvAttrs `json:"activity,omitempty"`
	Agent             map[string]ProvAttrs `json:"agent,omitempty"`
	WasGeneratedBy    map[string]ProvAttrs `json:"wasGeneratedBy,omitempty"`
	Used              map[string]ProvAttrs `json:"used,omitempty"`
	WasInformedBy     map[string]ProvAttrs `json:"wasInformedBy,omitempty"`
	WasDerivedFrom    map[string]ProvAttrs `json:"wasDerivedFrom,omitempty"`
	WasAttributedTo   map[string]ProvAttrs `json:"wasAttributedTo,omitempty"`
	WasAssociatedWith map[string]ProvAttrs `json:"wasAssociatedWith,omitempty"`
	ActedOnBehalfOf   map[string]ProvAttrs `json:"actedOnBehalfOf,omitempty"`
}

// provBuilder numbers relations as they are added, so one trace gives one document.
type provBuilder struct {
	doc ProvDocument
	n   int
}

func (b *provBuilder) relation(kind *map[string]ProvAttrs, attrs ProvAttrs) {
	if *kind == nil {
		*kind = map[string]ProvAttrs{}
	}
	b.n++
	(*kind)["_:r"+strconv.Itoa(b.n)] = attrs
}

// Names of a trace's records in the product's namespace.
func provFile(id string) string        { return ProvPrefix + ":file-" + id }
func provAcquisition(id string) string { return ProvPrefix + ":acquisition-" + id }
func provRecord(id string, v int) string {
	return ProvPrefix + ":acquisition-" + id + "-v" + strconv.Itoa(v)
}
func provDerivation(id string) string  { return ProvPrefix + ":derivation-" + id }
func provUser(id string) string        { return ProvPrefix + ":user-" + id }
func provProject(id string) string     { return ProvPrefix + ":project-" + id }
func provInstrument(id string) string  { return ProvPrefix + ":instrument-" + id }
func provSpecimen(id string) string    { return ProvPrefix + ":specimen-" + id }
func provTuning(id string) string      { return ProvPrefix + ":tuning-" + id }
func provCalibration(id string) string { return ProvPrefix + ":calibration-" + id }
func provBooking(id string) string     { return ProvPrefix + ":booking-" + id }

// ProvFileDigestKey is the attribute holding a file entity's SHA-256 (hex).
const ProvFileDigestKey = ProvPrefix + ":sha256"

// NewProvDocument exports a trace as PROV-JSON. namespace is the IRI the product's
// prefix stands for (the facility's own, so that names from two facilities differ).
func NewProvDocument(t Trace, namespace string) ProvDocument {
	b := &provBuilder{doc: ProvDocument{
		Prefix: map[string]string{ProvPrefix: namespace, "xsd": "http://www.w3.org/2001/XMLSchema#", "prov": "http://www.w3.org/ns/prov#"},
		Entity: map[string]ProvAttrs{}, Activity: map[string]ProvAttrs{}, Agent: map[string]ProvAttrs{},
	}}
	b.project(t.Project.ID, t.Project.Code+" "+t.Project.Title)
	for _, p := range t.People {
		a := ProvAttrs{"prov:type": qname("prov:Person"), "prov:label": p.DisplayName}
		if p.ORCID != "" {
			a[ProvPrefix+":orcid"] = p.ORCID
		}
		b.doc.Agent[provUser(p.ID)] = a
	}
	b.file(t.File)
	for _, f := range t.Files {
		b.file(f)
	}
	if t.Acquisition != nil {
		b.acquisition(t)
	}
	b.derivations(t)
	return b.doc
}

func (b *provBuilder) project(id, label string) {
	if _, ok := b.doc.Agent[provProject(id)]; ok || id == "" {
		return
	}
	a := ProvAttrs{"prov:type": qname("prov:Organization")}
	if label != "" {
		a["prov:label"] = label
	}
	b.doc.Agent[provProject(id)] = a
}

// file adds a data file, attributed to its project.
func (b *provBuilder) file(f DataFile) {
	b.doc.Entity[provFile(f.ID)] = ProvAttrs{
		"prov:type": qname(ProvPrefix + ":DataFile"), "prov:label": f.FileName, ProvFileDigestKey: f.SHA256,
		ProvPrefix + ":sizeBytes": f.SizeBytes, ProvPrefix + ":mediaType": f.MediaType,
	}
	b.project(f.ProjectID, "")
	b.relation(&b.doc.WasAttributedTo, ProvAttrs{"prov:entity": provFile(f.ID), "prov:agent": provProject(f.ProjectID)})
	if f.AcquisitionID != nil {
		b.relation(&b.doc.WasGeneratedBy, ProvAttrs{"prov:entity": provFile(f.ID), "prov:activity": provAcquisition(*f.AcquisitionID)})
	}
}

// acquisition adds the session, its records (one per version, each a revision of
// the one before), what it used and who and what ran it.
func (b *provBuilder) acquisition(t Trace) {
	a := t.Acquisition
	act := provAcquisition(a.ID)
	b.doc.Activity[act] = ProvAttrs{"prov:type": qname(ProvPrefix + ":AcquisitionSession"),
		"prov:startTime": a.StartedAt.UTC().Format(time.RFC3339Nano), "prov:endTime": a.EndedAt.UTC().Format(time.RFC3339Nano)}
	for i, v := range a.Versions {
		rec := ProvAttrs{"prov:type": qname(ProvPrefix + ":AcquisitionRecord"), ProvPrefix + ":version": v.Version,
			ProvPrefix + ":conditions": string(v.Conditions), ProvPrefix + ":derived": string(v.Derived),
			ProvPrefix + ":recordedAt": dateTime(v.CreatedAt), ProvPrefix + ":inForce": v.Version == a.Version}
		if v.FluenceEPerA2 != nil {
			rec[ProvPrefix+":fluenceEPerA2"] = *v.FluenceEPerA2
		}
		if v.Reason != "" {
			rec[ProvPrefix+":correctionReason"] = v.Reason
		}
		b.doc.Entity[provRecord(a.ID, v.Version)] = rec
		b.relation(&b.doc.WasGeneratedBy, ProvAttrs{"prov:entity": provRecord(a.ID, v.Version), "prov:activity": act})
		b.relation(&b.doc.WasAttributedTo, ProvAttrs{"prov:entity": provRecord(a.ID, v.Version), "prov:agent": provUser(a.OperatorID)})
		if i > 0 {
			b.relation(&b.doc.WasDerivedFrom, ProvAttrs{"prov:generatedEntity": provRecord(a.ID, v.Version),
				"prov:usedEntity": provRecord(a.ID, a.Versions[i-1].Version), "prov:type": qname("prov:Revision")})
		}
	}
	if in := t.Instrument; in != nil {
		// PROV-DM names three kinds of agent; an instrument acts through its control
		// software, so it is a software agent, typed as an instrument as well.
		b.doc.Agent[provInstrument(in.ID)] = ProvAttrs{"prov:type": []any{qname("prov:SoftwareAgent"), qname(ProvPrefix + ":Instrument")},
			"prov:label": in.Code + " " + in.Name}
		b.relation(&b.doc.WasAssociatedWith, ProvAttrs{"prov:activity": act, "prov:agent": provInstrument(in.ID),
			"prov:role": qname(ProvPrefix + ":instrument")})
	}
	assoc := ProvAttrs{"prov:activity": act, "prov:agent": provUser(a.OperatorID), "prov:role": qname(ProvPrefix + ":operator")}
	if bk := t.Booking; bk != nil {
		b.doc.Entity[provBooking(bk.ID)] = ProvAttrs{"prov:type": []any{qname("prov:Plan"), qname(ProvPrefix + ":Booking")},
			ProvPrefix + ":kind": string(bk.Kind), ProvPrefix + ":start": dateTime(bk.Start), ProvPrefix + ":end": dateTime(bk.End)}
		assoc["prov:plan"] = provBooking(bk.ID)
	}
	b.relation(&b.doc.WasAssociatedWith, assoc)
	b.relation(&b.doc.ActedOnBehalfOf, ProvAttrs{"prov:delegate": provUser(a.OperatorID), "prov:responsible": provProject(a.ProjectID), "prov:activity": act})
	b.used(t, act)
}

// used adds the specimen, tuning and calibrations the session used.
func (b *provBuilder) used(t Trace, act string) {
	if s := t.Specimen; s != nil {
		e := ProvAttrs{"prov:type": qname(ProvPrefix + ":Specimen"), "prov:label": s.Code,
			ProvPrefix + ":fluenceBeforeEPerA2": s.FluenceBeforeEPerA2, ProvPrefix + ":fluenceAfterEPerA2": s.FluenceAfterEPerA2}
		if s.FluenceBudgetEPerA2 != nil {
			e[ProvPrefix+":fluenceBudgetEPerA2"] = *s.FluenceBudgetEPerA2
		}
		b.doc.Entity[provSpecimen(s.ID)] = e
		b.relation(&b.doc.Used, ProvAttrs{"prov:activity": act, "prov:entity": provSpecimen(s.ID)})
	}
	if tu := t.Tuning; tu != nil {
		coeffs, _ := json.Marshal(tu.Coefficients)
		b.doc.Entity[provTuning(tu.ID)] = ProvAttrs{"prov:type": qname(ProvPrefix + ":Tuning"),
			ProvPrefix + ":measuredAt": dateTime(tu.MeasuredAt), ProvPrefix + ":coefficients": string(coeffs)}
		b.relation(&b.doc.Used, ProvAttrs{"prov:activity": act, "prov:entity": provTuning(tu.ID)})
	}
	for _, c := range t.Calibrations {
		b.doc.Entity[provCalibration(c.ID)] = ProvAttrs{"prov:type": qname(ProvPrefix + ":Calibration"),
			ProvPrefix + ":kind": string(c.Kind), ProvPrefix + ":subject": c.Subject, ProvPrefix + ":effectiveFrom": dateTime(c.EffectiveFrom)}
		b.relation(&b.doc.Used, ProvAttrs{"prov:activity": act, "prov:entity": provCalibration(c.ID)})
	}
}

// derivations adds each processing step: the inputs it used, the output it
// generated and derived from them, who ran it for which project, and the
// activities that generated its inputs, which informed it.
func (b *provBuilder) derivations(t Trace) {
	generator := map[string]string{}
	for _, f := range append([]DataFile{t.File}, t.Files...) {
		if f.AcquisitionID != nil {
			generator[f.ID] = provAcquisition(*f.AcquisitionID)
		}
	}
	all := append(append([]Derivation{}, t.Upstream...), t.Downstream...)
	for _, d := range all {
		generator[d.OutputFileID] = provDerivation(d.ID)
	}
	for _, d := range all {
		act := provDerivation(d.ID)
		b.doc.Activity[act] = ProvAttrs{"prov:type": qname(ProvPrefix + ":Derivation"), "prov:endTime": d.PerformedAt.UTC().Format(time.RFC3339Nano),
			ProvPrefix + ":software": d.Software, ProvPrefix + ":softwareVersion": d.SoftwareVersion, ProvPrefix + ":parameters": string(d.Parameters)}
		if _, ok := b.doc.Entity[provFile(d.OutputFileID)]; !ok {
			b.doc.Entity[provFile(d.OutputFileID)] = ProvAttrs{"prov:type": qname(ProvPrefix + ":DataFile")}
		}
		b.relation(&b.doc.WasGeneratedBy, ProvAttrs{"prov:entity": provFile(d.OutputFileID), "prov:activity": act, "prov:time": d.PerformedAt.UTC().Format(time.RFC3339Nano)})
		informants := map[string]bool{}
		for _, in := range d.InputFileIDs {
			if _, ok := b.doc.Entity[provFile(in)]; !ok {
				// A file the caller may not read appears by name only.
				b.doc.Entity[provFile(in)] = ProvAttrs{"prov:type": qname(ProvPrefix + ":DataFile")}
			}
			b.relation(&b.doc.Used, ProvAttrs{"prov:activity": act, "prov:entity": provFile(in)})
			b.relation(&b.doc.WasDerivedFrom, ProvAttrs{"prov:generatedEntity": provFile(d.OutputFileID), "prov:usedEntity": provFile(in), "prov:activity": act})
			if g, ok := generator[in]; ok && !informants[g] {
				informants[g] = true
				b.relation(&b.doc.WasInformedBy, ProvAttrs{"prov:informed": act, "prov:informant": g})
			}
		}
		if _, ok := b.doc.Agent[provUser(d.OperatorID)]; !ok {
			b.doc.Agent[provUser(d.OperatorID)] = ProvAttrs{"prov:type": qname("prov:Person")}
		}
		b.relation(&b.doc.WasAssociatedWith, ProvAttrs{"prov:activity": act, "prov:agent": provUser(d.OperatorID), "prov:role": qname(ProvPrefix + ":operator")})
		b.project(d.ProjectID, "")
		b.relation(&b.doc.ActedOnBehalfOf, ProvAttrs{"prov:delegate": provUser(d.OperatorID), "prov:responsible": provProject(d.ProjectID), "prov:activity": act})
	}
}

// ProvFileDigest returns the SHA-256 that a PROV-JSON document gives the entity
// named by the file id, for a verifier comparing it with other parts of a bundle.
func ProvFileDigest(doc []byte, fileID string) (string, error) {
	var d struct {
		Entity map[string]map[string]any `json:"entity"`
	}
	if err := json.Unmarshal(doc, &d); err != nil {
		return "", fmt.Errorf("PROV-JSON: %w", err)
	}
	e, ok := d.Entity[provFile(fileID)]
	if !ok {
		return "", fmt.Errorf("PROV-JSON names no entity %s", provFile(fileID))
	}
	s, _ := e[ProvFileDigestKey].(string)
	if s == "" {
		return "", fmt.Errorf("PROV-JSON entity %s has no %s", provFile(fileID), ProvFileDigestKey)
	}
	return s, nil
}
