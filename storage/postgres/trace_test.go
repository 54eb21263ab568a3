package postgres_test

import (
	"context"
	"encoding/json"
	"testing"
	"time"

	"github.com/google/uuid"

	"beamledger"
	"beamledger/provenance"
)

// TestTrace gathers a raw file's trace: the corrected acquisition with both
// versions, the tuning and calibration its version in force names, the specimen's
// fluence around it, both steps downstream, and every record's events, proved
// against the signed checkpoint except the one event recorded after it.
func TestTrace(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, ptr(50.0))
	signer := newLedgerSigner(t)
	tu, err := db.RecordTuning(ctx, provenance.NewTuning{InstrumentID: w.inst.ID, MeasuredAt: w.start, RecordedBy: w.user.ID,
		Coefficients: []provenance.Coefficient{{Name: "C3", Order: 3, MagnitudeM: -5e-7, Text: "-0.5 µm"}}}, t0)
	if err != nil {
		t.Fatal(err)
	}
	nominal, measured := 0.08, 0.079
	cal, err := db.RecordCalibration(ctx, provenance.NewCalibration{InstrumentID: w.inst.ID, Kind: provenance.CalibrationCameraLength,
		EffectiveFrom: w.start, NominalCameraLengthM: &nominal, CameraLengthM: &measured, RecordedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}
	// An earlier acquisition on the specimen gives it 30 e⁻/Å² before ours.
	w.create(t, 30)
	withRefs := func(fluence float64, reason string) func(provenance.AcquisitionContext) (provenance.Draft, error) {
		return func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
			d := draft(ac, fluence)
			d.StartedAt, d.EndedAt = w.start.Add(30*time.Minute), w.start.Add(40*time.Minute)
			d.TuningID, d.CalibrationIDs, d.Reason = &tu.ID, []string{cal.ID}, reason
			return d, nil
		}
	}
	a, err := db.CreateAcquisition(ctx, provenance.NewAcquisition{Input: provenance.AcquisitionInput{BookingID: w.booking, SpecimenID: w.specimen.ID,
		StartedAt: w.start.Add(30 * time.Minute)}, VoltageV: 300e3, Actor: w.user.ID, Now: t0}, withRefs(20, ""))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.CorrectAcquisition(ctx, a.ID, provenance.NewAcquisition{Input: provenance.AcquisitionInput{SpecimenID: w.specimen.ID,
		StartedAt: w.start.Add(30 * time.Minute), Reason: "the current was 25 pA", BaseVersion: ptr(1)}, VoltageV: 300e3, Actor: w.user.ID, Now: t0},
		withRefs(25, "the current was 25 pA")); err != nil {
		t.Fatal(err)
	}
	raw := w.file(t, a.ID, "raw frame")
	out := processed(t, w, "aligned stack")
	out2 := processed(t, w, "volume")
	derive(t, w, out.ID, raw.ID)
	cp, err := db.SignCheckpoint(ctx, signer, t0)
	if err != nil {
		t.Fatal(err)
	}
	late := derive(t, w, out2.ID, out.ID) // recorded after the checkpoint: unsealed

	tr, err := db.Trace(ctx, raw.ID)
	if err != nil {
		t.Fatal(err)
	}
	if tr.SHA256 != digestOf("raw frame") || tr.File.ID != raw.ID || tr.Project.ID != w.project.ID {
		t.Errorf("file %+v", tr.File)
	}
	if tr.Acquisition == nil || tr.Acquisition.Version != 2 || len(tr.Acquisition.Versions) != 2 || tr.Acquisition.Reason != "the current was 25 pA" {
		t.Fatalf("acquisition %+v", tr.Acquisition)
	}
	if tr.Booking == nil || tr.Booking.ID != w.booking || tr.Instrument == nil || tr.Instrument.ID != w.inst.ID {
		t.Errorf("booking %v, instrument %v", tr.Booking, tr.Instrument)
	}
	if tr.Operator == nil || tr.Operator.ID != w.user.ID || tr.BookedUser == nil {
		t.Errorf("operator %v", tr.Operator)
	}
	if tr.Tuning == nil || tr.Tuning.ID != tu.ID || len(tr.Calibrations) != 1 || tr.Calibrations[0].ID != cal.ID {
		t.Errorf("tuning %v, calibrations %v", tr.Tuning, tr.Calibrations)
	}
	// [computed] 30 e⁻/Å² from the acquisition that started earlier, plus this one's
	// 25 as corrected, against a budget of 50.
	if s := tr.Specimen; s == nil || s.FluenceBeforeEPerA2 != 30 || s.FluenceAfterEPerA2 != 55 || !s.OverBudgetAfter || s.FluenceUsedEPerA2 != 55 {
		t.Errorf("specimen %+v", tr.Specimen)
	}
	if len(tr.Upstream) != 0 || len(tr.Downstream) != 2 || len(tr.Files) != 2 {
		t.Errorf("lineage: %d up, %d down, %d files", len(tr.Upstream), len(tr.Downstream), len(tr.Files))
	}

	if tr.Ledger.Checkpoint == nil || tr.Ledger.Checkpoint.Size != cp.Size || tr.Ledger.KeyName != "ledger.test.example" {
		t.Fatalf("checkpoint %+v", tr.Ledger.Checkpoint)
	}
	if _, err := provenance.OpenCheckpoint([]byte(tr.Ledger.Checkpoint.Note), signer.Verifier()); err != nil {
		t.Errorf("checkpoint: %v", err)
	}
	counts := map[string]int{}
	for _, r := range tr.Ledger.Records {
		for _, e := range r.Events {
			counts[r.EntityType]++
			switch {
			case r.EntityID == late.ID:
				if e.Sealed || e.Proof != nil {
					t.Errorf("the late derivation's event is shown sealed")
				}
			case !e.Sealed || e.Proof == nil:
				t.Errorf("%s %s: event not sealed", r.EntityType, r.EntityID)
			case e.Proof.Check() != nil || e.Proof.Root != cp.Root || e.Proof.LeafHash != e.LeafHash():
				t.Errorf("%s %s: proof does not check against the checkpoint: %v", r.EntityType, r.EntityID, e.Proof.Check())
			}
		}
	}
	// A creation and a correction; one event each for the file, booking, specimen,
	// tuning, calibration; the two steps; the two processed files.
	want := map[string]int{"acquisition": 2, "data_file": 3, "specimen": 1, "tuning": 1, "calibration": 1, "derivation": 2, "booking": counts["booking"]}
	for k, n := range want {
		if counts[k] != n {
			t.Errorf("%s events: %d, want %d (all: %v)", k, counts[k], n, counts)
		}
	}

	// From the aligned stack: its step is upstream, the volume's downstream, and it
	// has no acquisition.
	st, err := db.Trace(ctx, out.ID)
	if err != nil || st.Acquisition != nil || len(st.Upstream) != 1 || len(st.Downstream) != 1 {
		t.Errorf("stack trace: %v, acquisition %v, %d up, %d down", err, st.Acquisition, len(st.Upstream), len(st.Downstream))
	}
	// The same bytes recorded again, as a processed file at the same instant: both
	// records, the acquisition's first, and none for a project that holds neither.
	again := processed(t, w, "raw frame")
	fs, err := db.FilesByDigest(ctx, digestOf("raw frame"), nil)
	if err != nil || len(fs) != 2 || fs[0].ID != raw.ID || fs[1].ID != again.ID {
		t.Errorf("records of the raw bytes: %v, %v", fs, err)
	}
	if fs, err := db.FilesByDigest(ctx, digestOf("raw frame"), []string{uuid.NewString()}); err != nil || len(fs) != 0 {
		t.Errorf("in another project: %v, %v", fs, err)
	}
	if _, err := db.Trace(ctx, uuid.NewString()); !beamledgerNotFound(err) {
		t.Errorf("unknown file: %v", err)
	}
}

func beamledgerNotFound(err error) bool {
	e, ok := err.(*beamledger.Error)
	return ok && e.Kind == beamledger.ErrNotFound
}

func processed(t *testing.T, w acqWorld, content string) provenance.DataFile {
	t.Helper()
	f, _, err := w.db.RecordFile(context.Background(), provenance.NewDataFile{ProjectID: w.project.ID, SHA256: digestOf(content),
		SizeBytes: int64(len(content)), MediaType: "image/tiff", FileName: "out.tif", Store: "file:///test", UploadedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func derive(t *testing.T, w acqWorld, out string, in ...string) provenance.Derivation {
	t.Helper()
	d, err := w.db.RecordDerivation(context.Background(), provenance.NewDerivation{OutputFileID: out, InputFileIDs: in, Software: "drift-align",
		SoftwareVersion: "2.3.1", Parameters: json.RawMessage(`{}`), OperatorID: w.user.ID, PerformedAt: t0, RecordedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}
	return d
}
