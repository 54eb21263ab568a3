package provenance

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance/optics"
	"beamledger/scheduling"
)

var t0 = time.Date(2026, 11, 30, 9, 0, 0, 0, time.UTC)

func f64(v float64) *float64 { return &v }

// recordContext is a booking of u1 on a 300 kV STEM with one annular detector, from
// t0 for four hours, looked at from t0 + 5 h.
func recordContext() AcquisitionContext {
	return AcquisitionContext{
		Booking: BookingRef{ID: "b", InstrumentID: "i", ProjectID: "p", UserID: "u1", Kind: scheduling.KindIndependent, Start: t0, End: t0.Add(4 * time.Hour)},
		Instrument: scheduling.Instrument{Code: "STEM-1", AcceleratingVoltagesV: []float64{300e3}, CameraLengthMaxM: f64(1),
			Detectors:       []scheduling.Detector{{Name: "HAADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: f64(6e-3), OuterRadiusM: f64(16e-3)}},
			ConditionChecks: scheduling.ConditionChecksError},
		Operator: OperatorRef{ID: "u1", Role: accounts.RoleResearcher, Member: true},
		Settings: optics.DefaultSettings(),
		Now:      t0.Add(5 * time.Hour),
	}
}

func recordInput(conditions string) AcquisitionInput {
	return AcquisitionInput{BookingID: "b", StartedAt: t0.Add(time.Hour), EndedAt: t0.Add(2 * time.Hour), Conditions: json.RawMessage(conditions)}
}

// stemConditions are REFERENCE.md §1's fluence example: 50 pA, 2 µs, 0.1 Å, one frame.
const stemConditions = `{"accelerating_voltage": "300 kV", "beam_current": "50 pA", "dwell_time": "2 µs", "pixel_size": "0.1 Å"}`

func rule(err error) string {
	var e *beamledger.Error
	if errors.As(err, &e) {
		return e.Rule
	}
	return ""
}

func TestRecordRefusals(t *testing.T) {
	cases := []struct {
		name   string
		change func(*AcquisitionContext, *AcquisitionInput)
		rule   string
		field  string
	}{
		{"service booking", func(ac *AcquisitionContext, _ *AcquisitionInput) { ac.Booking.ProjectID = "" }, "acquisition_booking", "booking_id"},
		{"cancelled booking", func(ac *AcquisitionContext, _ *AcquisitionInput) { ac.Booking.Cancelled = true }, "acquisition_booking", "booking_id"},
		{"start before the booking", func(_ *AcquisitionContext, in *AcquisitionInput) { in.StartedAt = t0.Add(-time.Second) }, "acquisition_within_booking", "started_at"},
		{"start at the booking's end", func(_ *AcquisitionContext, in *AcquisitionInput) { in.StartedAt = t0.Add(4 * time.Hour) }, "acquisition_within_booking", "started_at"},
		{"end in the future", func(ac *AcquisitionContext, _ *AcquisitionInput) { ac.Now = t0.Add(90 * time.Minute) }, "", "ended_at"},
		{"disabled operator", func(ac *AcquisitionContext, _ *AcquisitionInput) { ac.Operator.Disabled = true }, "", "operator_id"},
		{"operator outside the project", func(ac *AcquisitionContext, _ *AcquisitionInput) {
			ac.Operator = OperatorRef{ID: "u9", Role: accounts.RoleResearcher}
		}, "", "operator_id"},
		{"specimen of another project", func(ac *AcquisitionContext, _ *AcquisitionInput) { ac.Specimen = &Specimen{ID: "s", ProjectID: "q"} }, "", "specimen_id"},
		{"voltage not offered", func(_ *AcquisitionContext, in *AcquisitionInput) {
			in.Conditions = json.RawMessage(`{"accelerating_voltage": "200 kV"}`)
		}, "instrument_capability", "conditions.accelerating_voltage"},
		{"camera length too long", func(_ *AcquisitionContext, in *AcquisitionInput) {
			in.Conditions = json.RawMessage(`{"accelerating_voltage": "300 kV", "camera_length": "1.2 m"}`)
		}, "instrument_capability", "conditions.camera_length"},
		{"unknown detector", func(_ *AcquisitionContext, in *AcquisitionInput) {
			in.Conditions = json.RawMessage(`{"accelerating_voltage": "300 kV", "camera_length": "80 mm", "detectors": [{"name": "BF"}]}`)
		}, "instrument_capability", "conditions.detectors[0].name"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ac, in := recordContext(), recordInput(stemConditions)
			c.change(&ac, &in)
			_, err := Record(ac, in)
			if err == nil {
				t.Fatal("accepted")
			}
			if rule(err) != c.rule || beamledger.FieldReason(err) == "" {
				t.Errorf("rule %q, error %v; want rule %q", rule(err), err, c.rule)
			}
			var e *beamledger.Error
			if !errors.As(err, &e) || e.Fields[c.field] == "" {
				t.Errorf("error %v does not name %s", err, c.field)
			}
		})
	}
}

// TestRecordOperators: the booked user, the assisting staff member, a project member
// and any staff member may operate.
func TestRecordOperators(t *testing.T) {
	for _, op := range []OperatorRef{
		{ID: "u1", Role: accounts.RoleResearcher},
		{ID: "s1", Role: accounts.RoleResearcher}, // named as the booking's staff below
		{ID: "u2", Role: accounts.RoleResearcher, Member: true},
		{ID: "u3", Role: accounts.RoleStaff},
	} {
		ac := recordContext()
		ac.Booking.StaffID, ac.Operator = "s1", op
		if _, err := Record(ac, recordInput(stemConditions)); err != nil {
			t.Errorf("operator %+v: %v", op, err)
		}
	}
}

// TestRecordWarnsInsteadWhereConfigured: the same mismatches are accepted, each
// with a warning, when the instrument's checks are set to warnings.
func TestRecordWarnsInsteadWhereConfigured(t *testing.T) {
	ac := recordContext()
	ac.Instrument.ConditionChecks = scheduling.ConditionChecksWarning
	d, err := Record(ac, recordInput(`{"accelerating_voltage": "200 kV", "camera_length": "1.2 m"}`))
	if err != nil {
		t.Fatal(err)
	}
	if len(d.Warnings) != 2 || !strings.HasPrefix(d.Warnings[0], "conditions.accelerating_voltage") || !strings.HasPrefix(d.Warnings[1], "conditions.camera_length") {
		t.Errorf("warnings = %q", d.Warnings)
	}
}

// TestRecordBudget weighs a specimen's budget by the dose taken before the acquisition
// began plus its own. 62 415.09 e⁻/Å² per acquisition is REFERENCE.md §1's fluence
// example [computed].
func TestRecordBudget(t *testing.T) {
	cases := []struct {
		budget, before float64
		warn           bool
	}{
		{budget: 1e5, before: 0, warn: false},
		{budget: 1e5, before: 37584.9, warn: false}, // 99 999.99: just under
		{budget: 1e5, before: 37585, warn: true},    // 100 000.09: just past
		{budget: 5e4, before: 0, warn: true},        // past on its own
	}
	for _, c := range cases {
		ac := recordContext()
		ac.Specimen = &Specimen{ID: "s", ProjectID: "p", Code: "S1", FluenceBudgetEPerA2: f64(c.budget), FluenceUsedEPerA2: 9e9}
		ac.FluenceBeforeEPerA2 = c.before
		d, err := Record(ac, recordInput(stemConditions))
		if err != nil {
			t.Fatal(err)
		}
		if got := len(d.Warnings) == 1 && strings.Contains(d.Warnings[0], "passes its budget"); got != c.warn {
			t.Errorf("budget %v, before %v: warnings %q, want a budget warning %v", c.budget, c.before, d.Warnings, c.warn)
		}
		if d.FluenceEPerA2 == nil || *d.SpecimenID != "s" {
			t.Errorf("draft fluence %v, specimen %v", d.FluenceEPerA2, d.SpecimenID)
		}
	}
	// Without the inputs for a fluence, a budgeted specimen says it cannot be tracked.
	ac := recordContext()
	ac.Specimen = &Specimen{ID: "s", ProjectID: "p", Code: "S1", FluenceBudgetEPerA2: f64(1e5)}
	d, err := Record(ac, recordInput(`{"accelerating_voltage": "300 kV"}`))
	if err != nil || len(d.Warnings) != 1 || !strings.Contains(d.Warnings[0], "cannot be computed") {
		t.Errorf("untracked budget: %q, %v", d.Warnings, err)
	}
}

// TestRecordAppliesCalibrationsAndTuning: a calibrated camera length replaces the
// nominal one for deriving only, a detector named alone takes the instrument's radii,
// and the tuning supplies aberrations the client did not give.
func TestRecordAppliesCalibrationsAndTuning(t *testing.T) {
	ac := recordContext()
	ac.Calibrations = []Calibration{{ID: "c1", Kind: CalibrationCameraLength, NominalCameraLengthM: f64(0.08), CameraLengthM: f64(0.075)}}
	ac.Tuning = &Tuning{ID: "t1", MeasuredAt: t0, Coefficients: []Coefficient{{Name: "C3", Order: 3, MagnitudeM: 1e-6}}}
	d, err := Record(ac, recordInput(`{"accelerating_voltage": "300 kV", "convergence_semiangle": "25 mrad", "camera_length": "80.2 mm", "detectors": [{"name": "HAADF"}]}`))
	if err != nil {
		t.Fatal(err)
	}
	var derived struct {
		Detectors []struct {
			InnerMrad float64 `json:"inner_mrad"`
		} `json:"detectors"`
		Limits []struct {
			Coefficient string `json:"coefficient"`
		} `json:"aberration_limits"`
	}
	if err := json.Unmarshal(d.Derived, &derived); err != nil {
		t.Fatal(err)
	}
	// [computed] θ = r/L: 6 mm over the calibrated 75 mm is 80 mrad (the nominal 80.2 mm
	// lies within 0.5 % of the calibration's 80 mm and so takes it).
	if len(derived.Detectors) != 1 || derived.Detectors[0].InnerMrad < 79.999999 || derived.Detectors[0].InnerMrad > 80.000001 {
		t.Errorf("detectors = %+v", derived.Detectors)
	}
	if len(derived.Limits) != 1 || derived.Limits[0].Coefficient != "C3" || *d.TuningID != "t1" || len(d.CalibrationIDs) != 1 {
		t.Errorf("limits %+v, tuning %v, calibrations %v", derived.Limits, d.TuningID, d.CalibrationIDs)
	}
	if !strings.Contains(string(d.Conditions), `"text":"80.2 mm"`) || !strings.Contains(string(d.Conditions), `"text":"6 mm"`) {
		t.Errorf("stored conditions keep the nominal length and the filled radius: %s", d.Conditions)
	}
	if len(d.Applied) != 3 {
		t.Errorf("applied = %+v", d.Applied)
	}
}
