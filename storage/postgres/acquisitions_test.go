package postgres_test

import (
	"context"
	"encoding/json"
	"errors"
	"slices"
	"sync"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
)

// acqWorld is a booking on a corrected STEM with a project, its user and a specimen.
type acqWorld struct {
	db       *postgres.DB
	user     accounts.User
	project  accounts.Project
	inst     scheduling.Instrument
	booking  string
	start    time.Time
	specimen provenance.Specimen
}

func newAcqWorld(t *testing.T, db *postgres.DB, budget *float64) acqWorld {
	t.Helper()
	ctx := context.Background()
	w := acqWorld{db: db}
	w.user = mustCreateUser(t, db, "ada@example.org", accounts.RoleResearcher)
	w.project = mustCreateProject(t, db, "EM-01", w.user.ID)
	w.inst = mustCreateInstrument(t, db, "STEM-1")
	w.start = t0.Add(-4 * time.Hour).Truncate(time.Hour)
	if err := db.InsertBookingRow(ctx, scheduling.NewBooking{InstrumentID: w.inst.ID, ProjectID: w.project.ID, UserID: w.user.ID,
		Kind: scheduling.KindIndependent, Start: w.start, End: w.start.Add(3 * time.Hour), Actor: w.user.ID}); err != nil {
		t.Fatal(err)
	}
	bs, err := db.Bookings(ctx, scheduling.BookingFilter{InstrumentID: w.inst.ID, From: w.start, To: w.start.Add(time.Hour)})
	if err != nil || len(bs) != 1 {
		t.Fatalf("bookings = %v, %v", bs, err)
	}
	w.booking = bs[0].ID
	w.specimen, err = db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: w.project.ID, Code: "GB-7", FluenceBudgetEPerA2: budget, CreatedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}
	return w
}

// draft is a version as a decide function returns it, with the given fluence.
func draft(ac provenance.AcquisitionContext, fluence float64) provenance.Draft {
	return provenance.Draft{AcquisitionVersion: provenance.AcquisitionVersion{
		OperatorID: ac.Operator.ID, SpecimenID: ptr(ac.Specimen.ID), StartedAt: ac.Booking.Start.Add(10 * time.Minute),
		EndedAt: ac.Booking.Start.Add(20 * time.Minute), Conditions: json.RawMessage(`{"accelerating_voltage":{"si":300000}}`),
		Derived: json.RawMessage(`{"constants":"CODATA 2018","conventions":{},"warnings":[]}`), FluenceEPerA2: &fluence,
		CalibrationIDs: []string{}, Applied: []provenance.Applied{}, Warnings: []string{}, CreatedAt: t0,
	}}
}

func (w acqWorld) create(t *testing.T, fluence float64) (provenance.Acquisition, provenance.AcquisitionContext) {
	t.Helper()
	var seen provenance.AcquisitionContext
	a, err := w.db.CreateAcquisition(context.Background(), provenance.NewAcquisition{
		Input:    provenance.AcquisitionInput{BookingID: w.booking, SpecimenID: w.specimen.ID, StartedAt: w.start.Add(10 * time.Minute)},
		VoltageV: 300e3, Actor: w.user.ID, Now: t0,
	}, func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
		seen = ac
		return draft(ac, fluence), nil
	})
	if err != nil {
		t.Fatalf("CreateAcquisition: %v", err)
	}
	return a, seen
}

func TestAcquisitionContextAndVersions(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, ptr(1000.0))

	a, ac := w.create(t, 300)
	if ac.Booking.ID != w.booking || ac.Booking.ProjectID != w.project.ID || ac.Operator.ID != w.user.ID || !ac.Operator.Member {
		t.Errorf("context booking/operator = %+v / %+v", ac.Booking, ac.Operator)
	}
	if ac.Specimen == nil || ac.Specimen.FluenceUsedEPerA2 != 0 || ac.Tuning != nil || len(ac.Calibrations) != 0 {
		t.Errorf("context specimen/tuning/calibrations = %+v / %v / %v", ac.Specimen, ac.Tuning, ac.Calibrations)
	}
	if a.Version != 1 || a.ProjectID != w.project.ID || a.UserID != w.user.ID || a.CreatedBy != w.user.ID {
		t.Errorf("acquisition = %+v", a)
	}
	w.create(t, 500)
	sp, err := db.Specimen(ctx, w.specimen.ID)
	if err != nil || sp.FluenceUsedEPerA2 != 800 || sp.Acquisitions != 2 {
		t.Fatalf("specimen after two acquisitions = %+v, %v; want 800 e/Å² over 2", sp, err)
	}

	// A correction replaces the acquisition's fluence in the sum; the context it is
	// decided in leaves the acquisition's own old fluence out.
	var seen provenance.AcquisitionContext
	corrected, err := db.CorrectAcquisition(ctx, a.ID, provenance.NewAcquisition{
		Input:    provenance.AcquisitionInput{SpecimenID: w.specimen.ID, StartedAt: w.start.Add(10 * time.Minute), Reason: "dwell was 4 µs", BaseVersion: ptr(1)},
		VoltageV: 300e3, Actor: w.user.ID, Now: t0,
	}, func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
		seen = ac
		d := draft(ac, 600)
		d.Reason = "dwell was 4 µs"
		return d, nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if seen.Latest == nil || seen.Latest.Version != 1 || seen.Specimen.FluenceUsedEPerA2 != 500 {
		t.Errorf("correction context: latest %+v, used %v; want version 1 and 500 (the other acquisition only)", seen.Latest, seen.Specimen.FluenceUsedEPerA2)
	}
	if corrected.AcquisitionVersion.Version != 2 || corrected.Reason != "dwell was 4 µs" {
		t.Errorf("corrected = version %d reason %q", corrected.AcquisitionVersion.Version, corrected.Reason)
	}
	if sp, _ := db.Specimen(ctx, w.specimen.ID); sp.FluenceUsedEPerA2 != 1100 || sp.Acquisitions != 2 {
		t.Errorf("specimen after correction = %v e/Å² over %d; want 1100 over 2", sp.FluenceUsedEPerA2, sp.Acquisitions)
	}
	hist, err := db.AcquisitionHistory(ctx, a.ID)
	if err != nil || len(hist) != 2 || hist[0].Version != 1 || *hist[0].FluenceEPerA2 != 300 || hist[1].Version != 2 {
		t.Errorf("history = %+v, %v", hist, err)
	}

	// A correction against a stale version is a conflict, not a silent overwrite.
	_, err = db.CorrectAcquisition(ctx, a.ID, provenance.NewAcquisition{
		Input: provenance.AcquisitionInput{StartedAt: w.start, Reason: "again", BaseVersion: ptr(1)}, VoltageV: 300e3, Actor: w.user.ID, Now: t0,
	}, func(ac provenance.AcquisitionContext) (provenance.Draft, error) { return draft(ac, 1), nil })
	wantKind(t, err, beamledger.ErrConflict)

	// decide's error comes back unchanged and nothing is written.
	refusal := beamledger.RuleViolation("acquisition_within_booking", "outside", nil)
	_, err = db.CreateAcquisition(ctx, provenance.NewAcquisition{Input: provenance.AcquisitionInput{BookingID: w.booking, StartedAt: w.start}, VoltageV: 300e3, Actor: w.user.ID, Now: t0},
		func(provenance.AcquisitionContext) (provenance.Draft, error) { return provenance.Draft{}, refusal })
	if !errors.Is(err, refusal) && err != error(refusal) {
		t.Errorf("decide's refusal came back as %v", err)
	}
	all, err := db.Acquisitions(ctx, provenance.AcquisitionFilter{BookingID: w.booking})
	if err != nil || len(all) != 2 {
		t.Errorf("acquisitions on the booking = %d, %v; want 2", len(all), err)
	}
	if _, err := db.Acquisition(ctx, "not-an-id"); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("malformed id: %v", err)
	}
}

// TestAcquisitionBudgetIsWeighedInTurn: concurrent acquisitions on one specimen each
// see the fluence of all those committed before them, so every one sees a different
// sum. Without the specimen lock two would see the same sum and both could slip
// under the budget.
func TestAcquisitionBudgetIsWeighedInTurn(t *testing.T) {
	db, _ := openRaw(t)
	w := newAcqWorld(t, db, ptr(1000.0))
	const n = 12
	var mu sync.Mutex
	var seen []float64
	var wg sync.WaitGroup
	for i := 0; i < n; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var used float64
			_, err := db.CreateAcquisition(context.Background(), provenance.NewAcquisition{
				Input:    provenance.AcquisitionInput{BookingID: w.booking, SpecimenID: w.specimen.ID, StartedAt: w.start},
				VoltageV: 300e3, Actor: w.user.ID, Now: t0,
			}, func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
				used = ac.Specimen.FluenceUsedEPerA2
				return draft(ac, 100), nil
			})
			if err != nil {
				t.Error(err)
				return
			}
			mu.Lock()
			seen = append(seen, used)
			mu.Unlock()
		}()
	}
	wg.Wait()
	slices.Sort(seen)
	for i, v := range seen {
		if v != float64(100*i) {
			t.Fatalf("sums seen by concurrent acquisitions = %v; want 0, 100, …, %d each once", seen, 100*(n-1))
		}
	}
}

func TestTuningAndCalibrationsInForce(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	at := w.start.Add(10 * time.Minute)
	rec := func(measured time.Time, volts *float64, c3 float64, corrects *string) provenance.Tuning {
		t.Helper()
		n := provenance.NewTuning{InstrumentID: w.inst.ID, MeasuredAt: measured, VoltageV: volts, RecordedBy: w.user.ID,
			Coefficients: []provenance.Coefficient{{Name: "C3", Order: 3, MagnitudeM: c3, Text: "x"}}, Corrects: corrects}
		if corrects != nil {
			n.CorrectionReason = ptr("wrong sign")
		}
		tu, err := db.RecordTuning(ctx, n, t0)
		if err != nil {
			t.Fatal(err)
		}
		return tu
	}
	old := rec(at.Add(-48*time.Hour), nil, 1e-6, nil)
	at80 := rec(at.Add(-time.Hour), ptr(80e3), 2e-6, nil)
	wrong := rec(at.Add(-2*time.Hour), ptr(300e3), 3e-6, nil)
	fixed := rec(at.Add(-2*time.Hour), ptr(300e3), -3e-6, &wrong.ID)
	rec(at.Add(time.Hour), ptr(300e3), 4e-6, nil) // measured after the start: not yet in force

	_, ac := w.create(t, 1)
	if ac.Tuning == nil || ac.Tuning.ID != fixed.ID {
		t.Errorf("tuning in force at 300 kV = %+v; want the correction %s (the 80 kV one %s and the corrected %s do not apply, %s is older)",
			ac.Tuning, fixed.ID, at80.ID, wrong.ID, old.ID)
	}
	if _, err := db.RecordTuning(ctx, provenance.NewTuning{InstrumentID: w.inst.ID, MeasuredAt: at, RecordedBy: w.user.ID,
		Coefficients: []provenance.Coefficient{{Name: "C1", Order: 1}}, Corrects: &wrong.ID, CorrectionReason: ptr("again")}, t0); !errors.Is(err, beamledger.ErrConflict) {
		t.Errorf("second correction of one tuning: %v, want a conflict", err)
	}
	if got, _ := db.Tuning(ctx, wrong.ID); got.CorrectedBy == nil || *got.CorrectedBy != fixed.ID {
		t.Errorf("corrected tuning's corrected_by = %v", got.CorrectedBy)
	}

	cal := func(kind provenance.CalibrationKind, from time.Time, nominal, measured float64) provenance.Calibration {
		t.Helper()
		c, err := db.RecordCalibration(ctx, provenance.NewCalibration{InstrumentID: w.inst.ID, Kind: kind, EffectiveFrom: from,
			NominalCameraLengthM: &nominal, CameraLengthM: &measured, RecordedBy: w.user.ID}, t0)
		if err != nil {
			t.Fatal(err)
		}
		return c
	}
	cal(provenance.CalibrationCameraLength, at.Add(-30*24*time.Hour), 0.08, 0.079)
	newer := cal(provenance.CalibrationCameraLength, at.Add(-24*time.Hour), 0.08, 0.0774)
	other := cal(provenance.CalibrationCameraLength, at.Add(-24*time.Hour), 0.2, 0.196)
	cal(provenance.CalibrationCameraLength, at.Add(24*time.Hour), 0.08, 0.0771) // later
	inForce, err := db.Calibrations(ctx, w.inst.ID, &at)
	if err != nil {
		t.Fatal(err)
	}
	ids := []string{}
	for _, c := range inForce {
		ids = append(ids, c.ID)
	}
	want := []string{newer.ID, other.ID}
	slices.Sort(ids)
	slices.Sort(want)
	if !slices.Equal(ids, want) {
		t.Errorf("calibrations in force = %v; want the newer 80 mm one %s and the 200 mm one %s", ids, newer.ID, other.ID)
	}
	if all, _ := db.Calibrations(ctx, w.inst.ID, nil); len(all) != 4 {
		t.Errorf("all calibrations = %d, want 4", len(all))
	}
}

// TestProvenanceTablesAreAppendOnly: the database itself refuses to change or remove
// any record an auditor relies on, whatever a future bug in Go might try.
func TestProvenanceTablesAreAppendOnly(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	w.create(t, 1)
	if _, err := db.RecordTuning(ctx, provenance.NewTuning{InstrumentID: w.inst.ID, MeasuredAt: t0, RecordedBy: w.user.ID,
		Coefficients: []provenance.Coefficient{{Name: "C1", Order: 1}}}, t0); err != nil {
		t.Fatal(err)
	}
	if _, err := db.RecordCalibration(ctx, provenance.NewCalibration{InstrumentID: w.inst.ID, Kind: provenance.CalibrationPixelSize,
		EffectiveFrom: t0, Magnification: ptr(1e6), PixelSizeM: ptr(1e-11), RecordedBy: w.user.ID}, t0); err != nil {
		t.Fatal(err)
	}
	for _, stmt := range []string{
		`UPDATE specimens SET description = 'edited'`,
		`DELETE FROM specimens`,
		`UPDATE tunings SET notes = 'edited'`,
		`DELETE FROM tunings`,
		`UPDATE calibrations SET notes = 'edited'`,
		`DELETE FROM calibrations`,
		`UPDATE acquisitions SET created_by = 'someone else'`,
		`UPDATE acquisition_versions SET notes = 'edited'`,
		`DELETE FROM acquisition_versions`,
		`TRUNCATE acquisition_versions, acquisitions`,
		`TRUNCATE specimens CASCADE`,
	} {
		if _, err := conn.Exec(ctx, stmt); err == nil {
			t.Errorf("%s: accepted; want refused", stmt)
		}
	}
	var n int
	if err := conn.QueryRow(ctx, `SELECT (SELECT count(*) FROM acquisition_versions) + (SELECT count(*) FROM tunings) + (SELECT count(*) FROM calibrations) + (SELECT count(*) FROM specimens)`).Scan(&n); err != nil || n != 4 {
		t.Errorf("rows left = %d, %v; want all 4", n, err)
	}
}

func TestSpecimens(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	_, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: w.project.ID, Code: "GB-7", CreatedBy: w.user.ID}, t0)
	wantKind(t, err, beamledger.ErrConflict)
	other := mustCreateProject(t, db, "EM-02", w.user.ID)
	if _, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: other.ID, Code: "GB-7", CreatedBy: w.user.ID}, t0); err != nil {
		t.Errorf("same code in another project: %v", err)
	}
	_, err = db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: "00000000-0000-4000-8000-000000000000", Code: "X", CreatedBy: w.user.ID}, t0)
	if domainError(t, err).Fields["project_id"] == "" {
		t.Errorf("unknown project: %v, want the field named", err)
	}
	mine, err := db.Specimens(ctx, provenance.SpecimenFilter{ProjectIDs: []string{other.ID}})
	if err != nil || len(mine) != 1 || mine[0].ProjectID != other.ID {
		t.Errorf("specimens of %s = %+v, %v", other.Code, mine, err)
	}
	none, err := db.Specimens(ctx, provenance.SpecimenFilter{ProjectIDs: []string{}})
	if err != nil || len(none) != 0 {
		t.Errorf("specimens of no project = %+v, %v", none, err)
	}
}
