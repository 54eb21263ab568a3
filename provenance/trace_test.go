package provenance_test

import (
	"encoding/json"
	"slices"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// sampleTrace is a constructed trace [constructed]: a raw frame from a corrected
// acquisition on a budgeted specimen, aligned into a stack, which was then
// reconstructed into a volume.
func sampleTrace() provenance.Trace {
	at := time.Date(2026, 11, 3, 9, 30, 0, 0, time.UTC)
	acq, spec, tun, cal := "a0000000-0000-4000-8000-000000000001", "50000000-0000-4000-8000-000000000001", "70000000-0000-4000-8000-000000000001", "c0000000-0000-4000-8000-000000000001"
	raw := provenance.DataFile{ID: "f0000000-0000-4000-8000-000000000001", ProjectID: "b0000000-0000-4000-8000-000000000001", AcquisitionID: &acq,
		SHA256: "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad", SizeBytes: 3, MediaType: "image/tiff", FileName: "frame-001.tif", Status: provenance.FileStored}
	stack := provenance.DataFile{ID: "f0000000-0000-4000-8000-000000000002", ProjectID: raw.ProjectID, SHA256: "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1",
		SizeBytes: 56, MediaType: "image/tiff", FileName: "stack.tif", Status: provenance.FileStored}
	volume := provenance.DataFile{ID: "f0000000-0000-4000-8000-000000000003", ProjectID: raw.ProjectID, SHA256: "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0",
		SizeBytes: 1000000, MediaType: "application/octet-stream", FileName: "volume.mrc", Status: provenance.FileStored}
	fluence1, fluence2, budget := 40.0, 35.0, 100.0
	v1 := provenance.AcquisitionVersion{Version: 1, OperatorID: "e0000000-0000-4000-8000-000000000001", SpecimenID: &spec, StartedAt: at, EndedAt: at.Add(time.Hour),
		Conditions: json.RawMessage(`{"accelerating_voltage":{"si":300000,"text":"300 kV"}}`), Derived: json.RawMessage(`{"wavelength_m":1.9687e-12}`),
		FluenceEPerA2: &fluence1, TuningID: &tun, CalibrationIDs: []string{cal}, CreatedAt: at.Add(2 * time.Hour)}
	v2 := v1
	v2.Version, v2.FluenceEPerA2, v2.Reason, v2.CreatedAt = 2, &fluence2, "the beam current was 35 pA", at.Add(3*time.Hour)
	instrument := scheduling.Instrument{ID: "10000000-0000-4000-8000-000000000001", Code: "ARM-300", Name: "Corrected STEM"}
	booking := scheduling.Booking{ID: "b1000000-0000-4000-8000-000000000001", InstrumentID: instrument.ID, ProjectID: raw.ProjectID, UserID: v1.OperatorID,
		Kind: scheduling.KindIndependent, Start: at.Add(-time.Hour), End: at.Add(3 * time.Hour)}
	operator := provenance.TracePerson{ID: v1.OperatorID, DisplayName: "Ines Okafor", Role: accounts.RoleResearcher}
	analyst := provenance.TracePerson{ID: "e0000000-0000-4000-8000-000000000002", DisplayName: "Tomas Reyes", Role: accounts.RoleResearcher}
	align := provenance.Derivation{ID: "d0000000-0000-4000-8000-000000000001", ProjectID: raw.ProjectID, OutputFileID: stack.ID, InputFileIDs: []string{raw.ID},
		Software: "drift-align", SoftwareVersion: "2.3.1", Parameters: json.RawMessage(`{"bin":2}`), OperatorID: analyst.ID, PerformedAt: at.Add(24 * time.Hour)}
	recon := provenance.Derivation{ID: "d0000000-0000-4000-8000-000000000002", ProjectID: raw.ProjectID, OutputFileID: volume.ID, InputFileIDs: []string{stack.ID},
		Software: "tomo-recon", SoftwareVersion: "0.9", Parameters: json.RawMessage(`{}`), OperatorID: analyst.ID, PerformedAt: at.Add(48 * time.Hour)}
	sp := provenance.Specimen{ID: spec, ProjectID: raw.ProjectID, Code: "GB-7", FluenceBudgetEPerA2: &budget, FluenceUsedEPerA2: 105}
	return provenance.Trace{
		SHA256: raw.SHA256, File: raw, OtherRecords: []string{},
		Project:    accounts.Project{ID: raw.ProjectID, Code: "P-118", Title: "Grain boundaries in doped ceria"},
		Upstream:   []provenance.Derivation{},
		Downstream: []provenance.Derivation{align, recon},
		Files:      []provenance.DataFile{stack, volume},
		People:     []provenance.TracePerson{operator, analyst},
		Acquisition: &provenance.TraceAcquisition{Acquisition: provenance.Acquisition{ID: acq, BookingID: booking.ID, InstrumentID: instrument.ID,
			ProjectID: raw.ProjectID, UserID: operator.ID, AcquisitionVersion: v2}, Versions: []provenance.AcquisitionVersion{v1, v2}},
		Booking: &booking, Instrument: &instrument, Operator: &operator, BookedUser: &operator,
		Specimen:     provenance.NewTraceSpecimen(sp, 70, &fluence2),
		Tuning:       &provenance.Tuning{ID: tun, InstrumentID: instrument.ID, MeasuredAt: at.Add(-24 * time.Hour), Coefficients: []provenance.Coefficient{{Name: "C3", Order: 3, MagnitudeM: -5e-7, Text: "-0.5 µm"}}},
		Calibrations: []provenance.Calibration{{ID: cal, InstrumentID: instrument.ID, Kind: provenance.CalibrationDetectorAngles, Subject: "HAADF", EffectiveFrom: at.Add(-48 * time.Hour)}},
	}
}

// TestTraceSpecimenFluence: the fluence after an acquisition is the fluence before
// plus the acquisition's own, and the budget is weighed on the total.
func TestTraceSpecimenFluence(t *testing.T) {
	budget, f := 100.0, 35.0
	s := provenance.Specimen{FluenceBudgetEPerA2: &budget}
	// [constructed] 70 e⁻/Å² before and 35 e⁻/Å² in the acquisition make 105, past a
	// budget of 100.
	got := provenance.NewTraceSpecimen(s, 70, &f)
	if got.FluenceBeforeEPerA2 != 70 || got.FluenceAfterEPerA2 != 105 || !got.OverBudgetAfter {
		t.Errorf("fluence = %+v", got)
	}
	// [constructed] an acquisition with no fluence (TEM without a dose rate) leaves it as it was.
	if got := provenance.NewTraceSpecimen(s, 70, nil); got.FluenceAfterEPerA2 != 70 || got.OverBudgetAfter {
		t.Errorf("no fluence: %+v", got)
	}
}

// TestSplitLineage: a file's producer and its inputs' producers are upstream; the
// steps that used it are downstream.
func TestSplitLineage(t *testing.T) {
	tr := sampleTrace()
	align, recon := tr.Downstream[0], tr.Downstream[1]
	l := provenance.Lineage{Derivations: []provenance.Derivation{align, recon}}
	// From the aligned stack, its alignment is upstream and the reconstruction downstream.
	up, down := provenance.SplitLineage(l, tr.Files[0].ID)
	if len(up) != 1 || up[0].ID != align.ID || len(down) != 1 || down[0].ID != recon.ID {
		t.Errorf("from the stack: up %v, down %v", up, down)
	}
	// From the volume both steps lie upstream; from the raw frame both downstream.
	if up, down = provenance.SplitLineage(l, tr.Files[1].ID); len(up) != 2 || len(down) != 0 {
		t.Errorf("from the volume: up %d, down %d", len(up), len(down))
	}
	if up, down = provenance.SplitLineage(l, tr.File.ID); len(up) != 0 || len(down) != 2 {
		t.Errorf("from the raw file: up %d, down %d", len(up), len(down))
	}
}

// TestTraceRefs lists each record once, the traced file first.
func TestTraceRefs(t *testing.T) {
	tr := sampleTrace()
	refs := tr.Refs()
	want := []provenance.TraceRef{
		{EntityType: "data_file", EntityID: tr.File.ID}, {EntityType: "acquisition", EntityID: tr.Acquisition.ID},
		{EntityType: "booking", EntityID: tr.Booking.ID}, {EntityType: "specimen", EntityID: tr.Specimen.ID},
		{EntityType: "tuning", EntityID: tr.Tuning.ID}, {EntityType: "calibration", EntityID: tr.Calibrations[0].ID},
		{EntityType: "derivation", EntityID: tr.Downstream[0].ID}, {EntityType: "derivation", EntityID: tr.Downstream[1].ID},
		{EntityType: "data_file", EntityID: tr.Files[0].ID}, {EntityType: "data_file", EntityID: tr.Files[1].ID},
	}
	if !slices.Equal(refs, want) {
		t.Errorf("refs:\n got %v\nwant %v", refs, want)
	}
}
