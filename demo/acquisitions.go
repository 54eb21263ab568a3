package demo

import (
	"context"
	"encoding/json"
	"fmt"
	"time"

	"beamledger/provenance"
	"beamledger/scheduling"
)

// ProvenanceStores is what loading the demo acquisitions needs.
type ProvenanceStores interface {
	provenance.SpecimenStore
	provenance.TuningStore
	provenance.CalibrationStore
	provenance.AcquisitionStore
}

// demoSpecimen is the demo's beam-sensitive cathode lamella; its invented budget is
// small enough that the third acquisition passes it.
var demoSpecimen = provenance.NewSpecimen{Code: "SSB-L3", Description: "FIB lamella across the cathode–electrolyte interface, cell 3 after 50 cycles",
	FluenceBudgetEPerA2: f64(2.5e5)}

func f64(v float64) *float64 { return &v }

// demoAcquisition is one acquisition of last week's session: minutes after the
// session's start, its length, notes and the conditions as a person would type them.
type demoAcquisition struct {
	at, minutes int
	notes       string
	conditions  string
}

var lastWeek = []demoAcquisition{
	{20, 15, "HAADF survey of the interface, 2k × 2k", `{"accelerating_voltage": "300 kV", "beam_current": "25 pA", "convergence_semiangle": "24 mrad",
		"dwell_time": "2 µs", "pixel_size": "20 pm", "camera_length": "100 mm", "detectors": [{"name": "HAADF"}, {"name": "ABF"}],
		"specimen_temperature": "20 °C", "extra": {"holder": "double tilt", "condenser aperture": "C2 50 µm"}}`},
	{50, 40, "4D-STEM scan for strain and oxygen ordering, 256 × 256 probe positions", `{"accelerating_voltage": "300 kV", "beam_current": "5 pA",
		"convergence_semiangle": "1.2 mrad", "dwell_time": "1 ms", "pixel_size": "1.5 nm", "camera_length": "60 mm", "frame_count": 1,
		"detectors": [{"name": "PIXEL-4D"}], "defocus": "0 nm"}`},
	{110, 30, "EELS map of the Co L and O K edges", `{"accelerating_voltage": "300 kV", "beam_current": "150 pA", "convergence_semiangle": "24 mrad",
		"dwell_time": "5 ms", "pixel_size": "50 pm", "camera_length": "60 mm", "detectors": [{"name": "EELS"}, {"name": "HAADF"}]}`},
}

// LoadAcquisitions records, once, last week's session on the corrected STEM: the
// corrector tuning and calibrations staff measured before it, a specimen with a
// fluence budget, three acquisitions (the last past the budget, with its warning) and
// a correction of the first, so that the acquisition pages have a history to show.
func LoadAcquisitions(ctx context.Context, st Stores, bst BookingStores, pst ProvenanceStores, now time.Time) error {
	users, projects, instruments, err := demoIDs(ctx, st)
	if err != nil {
		return err
	}
	project, stem, staff, researcher := projects["SSB-INTERFACE"], instruments["STEM-CORR"], users["staff@demo.example"], users["researcher@demo.example"]
	have, err := pst.Specimens(ctx, provenance.SpecimenFilter{ProjectID: project})
	if err != nil {
		return err
	}
	for _, s := range have {
		if s.Code == demoSpecimen.Code {
			return nil
		}
	}
	loc, err := time.LoadLocation(Facility.TimeZone)
	if err != nil {
		return err
	}
	monday, _ := scheduling.PeriodBounds(scheduling.PeriodWeek, now, loc)
	day := monday.In(loc).AddDate(0, 0, -4) // last Thursday
	start := time.Date(day.Year(), day.Month(), day.Day(), 9, 0, 0, 0, loc).UTC()
	b, err := bst.CreateBooking(ctx, scheduling.NewBooking{InstrumentID: stem, ProjectID: project, UserID: researcher,
		Kind: scheduling.KindIndependent, Start: start, End: start.Add(4 * time.Hour), Note: "interface session", Actor: staff},
		now, func(scheduling.BookingContext) error { return nil })
	if err != nil {
		return fmt.Errorf("demo session booking: %w", err)
	}
	if err := loadTuningAndCalibrations(ctx, pst, stem, staff, start, now); err != nil {
		return err
	}
	sp := demoSpecimen
	sp.ProjectID, sp.CreatedBy = project, researcher
	specimen, err := pst.CreateSpecimen(ctx, sp, start.Add(-time.Hour))
	if err != nil {
		return fmt.Errorf("demo specimen: %w", err)
	}
	var first provenance.Acquisition
	for i, a := range lastWeek {
		in := provenance.AcquisitionInput{BookingID: b.ID, SpecimenID: specimen.ID, StartedAt: start.Add(time.Duration(a.at) * time.Minute),
			EndedAt: start.Add(time.Duration(a.at+a.minutes) * time.Minute), Notes: a.notes, Conditions: json.RawMessage(a.conditions)}
		got, err := record(ctx, pst, in, "", researcher, now)
		if err != nil {
			return fmt.Errorf("demo acquisition %d: %w", i+1, err)
		}
		if i == 0 {
			first = got
		}
	}
	// The first survey's current was read off the wrong gauge: corrected, not overwritten.
	fix := provenance.AcquisitionInput{SpecimenID: specimen.ID, StartedAt: first.StartedAt, EndedAt: first.EndedAt, Notes: lastWeek[0].notes,
		Conditions: json.RawMessage(`{"accelerating_voltage": "300 kV", "beam_current": "32 pA", "convergence_semiangle": "24 mrad",
		"dwell_time": "2 µs", "pixel_size": "20 pm", "camera_length": "100 mm", "detectors": [{"name": "HAADF"}, {"name": "ABF"}],
		"specimen_temperature": "20 °C", "extra": {"holder": "double tilt", "condenser aperture": "C2 50 µm"}}`),
		Reason: "probe current re-measured with the drift tube after the session: 32 pA, not 25 pA", BaseVersion: &first.Version}
	if _, err := record(ctx, pst, fix, first.ID, researcher, now); err != nil {
		return fmt.Errorf("demo correction: %w", err)
	}
	return nil
}

// record stores an acquisition (or, with id, a correction of it) as the API does.
func record(ctx context.Context, pst ProvenanceStores, in provenance.AcquisitionInput, id, actor string, now time.Time) (provenance.Acquisition, error) {
	volts, err := in.Normalize(id != "")
	if err != nil {
		return provenance.Acquisition{}, err
	}
	n := provenance.NewAcquisition{Input: in, VoltageV: volts, Actor: actor, Now: now}
	decide := func(ac provenance.AcquisitionContext) (provenance.Draft, error) { return provenance.Record(ac, in) }
	if id != "" {
		return pst.CorrectAcquisition(ctx, id, n, decide)
	}
	return pst.CreateAcquisition(ctx, n, decide)
}

// loadTuningAndCalibrations records what staff measured on the corrected STEM before
// the session. The coefficients are invented but of the size a tuned probe corrector
// leaves at 300 kV.
func loadTuningAndCalibrations(ctx context.Context, pst ProvenanceStores, stem, staff string, session, now time.Time) error {
	tuning := provenance.TuningInput{MeasuredAt: session.Add(-30 * time.Minute), AcceleratingVoltage: json.RawMessage(`"300 kV"`),
		Coefficients: json.RawMessage(`{"C1": {"magnitude": "0.4 nm", "uncertainty": "0.2 nm"}, "A1": {"magnitude": "0.6 nm", "angle": "12 °"},
			"B2": {"magnitude": "8 nm", "angle": "-40 °"}, "A2": {"magnitude": "15 nm", "angle": "75 °"}, "C3": {"magnitude": "-0.9 µm", "uncertainty": "0.3 µm"},
			"S3": {"magnitude": "0.35 µm", "angle": "20 °"}, "A3": {"magnitude": "0.6 µm", "angle": "-10 °"}, "C5": "1.1 mm"}`),
		Notes: "after the weekly corrector alignment"}
	nt, err := tuning.Tuning(stem, staff)
	if err != nil {
		return fmt.Errorf("demo tuning: %w", err)
	}
	if _, err := pst.RecordTuning(ctx, nt, session.Add(-25*time.Minute)); err != nil {
		return fmt.Errorf("demo tuning: %w", err)
	}
	from := session.Add(-2 * 24 * time.Hour)
	cals := []provenance.CalibrationInput{
		{Kind: provenance.CalibrationCameraLength, EffectiveFrom: from, NominalCameraLength: json.RawMessage(`"60 mm"`), CameraLength: json.RawMessage(`"58.7 mm"`),
			Uncertainty: f64(0.01), Notes: "from a polycrystalline gold ring pattern"},
		{Kind: provenance.CalibrationCameraLength, EffectiveFrom: from, NominalCameraLength: json.RawMessage(`"100 mm"`), CameraLength: json.RawMessage(`"97.9 mm"`),
			Uncertainty: f64(0.01), Notes: "from a polycrystalline gold ring pattern"},
		{Kind: provenance.CalibrationDetectorAngles, EffectiveFrom: from, Detector: "HAADF", InnerAngle: json.RawMessage(`"68 mrad"`), OuterAngle: json.RawMessage(`"215 mrad"`),
			Notes: "detector scan at the 100 mm camera length"},
		{Kind: provenance.CalibrationPixelSize, EffectiveFrom: from, Magnification: f64(10e6), PixelSize: json.RawMessage(`"9.8 pm"`), Uncertainty: f64(0.015),
			Notes: "from silicon [110] dumbbell spacings"},
	}
	detectors := []string{"BF", "ABF", "ADF", "HAADF", "PIXEL-4D", "EELS"}
	for _, in := range cals {
		n, err := in.Calibration(stem, staff, detectors)
		if err != nil {
			return fmt.Errorf("demo calibration %s: %w", in.Kind, err)
		}
		if _, err := pst.RecordCalibration(ctx, n, session.Add(-24*time.Hour)); err != nil {
			return fmt.Errorf("demo calibration %s: %w", in.Kind, err)
		}
	}
	return nil
}
