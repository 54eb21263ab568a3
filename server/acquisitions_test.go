package server

import (
	"context"
	"math"
	"net/http"
	"strings"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// acqFixture is a corrected STEM with two detectors and a camera-length range, a
// booking of the researcher on it that began three hours ago, and a specimen with a
// fluence budget in the researcher's project.
type acqFixture struct {
	inst     scheduling.Instrument
	booking  string
	start    time.Time
	specimen provenance.Specimen
}

func f64(v float64) *float64 { return &v }

// pastBooking inserts an active booking of user in project on instrument from three
// hours ago to one hour ahead, past the rules (which refuse bookings in the past).
func (w *world) pastBooking(instrumentID, projectID, userID string) (string, time.Time) {
	w.t.Helper()
	ctx := context.Background()
	start := w.clock.Now().Add(-3 * time.Hour).Truncate(time.Minute)
	if err := w.db.InsertBookingRow(ctx, scheduling.NewBooking{InstrumentID: instrumentID, ProjectID: projectID, UserID: userID,
		Kind: scheduling.KindIndependent, Start: start, End: start.Add(4 * time.Hour), Actor: userID}); err != nil {
		w.t.Fatal(err)
	}
	bs, err := w.db.Bookings(ctx, scheduling.BookingFilter{InstrumentID: instrumentID, From: start, To: start.Add(time.Minute)})
	if err != nil || len(bs) != 1 {
		w.t.Fatalf("past booking: %v %v", bs, err)
	}
	return bs[0].ID, start
}

func newAcqFixture(w *world) acqFixture {
	w.t.Helper()
	ctx := context.Background()
	var f acqFixture
	var err error
	f.inst, err = w.db.CreateInstrument(ctx, scheduling.Instrument{Code: "STEM-A", Name: "Corrected STEM", Kind: scheduling.KindSTEM, Bookable: true,
		AcceleratingVoltagesV: []float64{80e3, 300e3}, Corrector: scheduling.CorrectorProbe, CameraLengthMinM: f64(0.02), CameraLengthMaxM: f64(2.5),
		Detectors: []scheduling.Detector{
			{Name: "HAADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: f64(6e-3), OuterRadiusM: f64(16e-3)},
			{Name: "ABF", Kind: scheduling.DetectorAnnular, InnerRadiusM: f64(1e-3), OuterRadiusM: f64(2e-3)},
		}}, "setup", time.Now())
	if err != nil {
		w.t.Fatal(err)
	}
	researcher := w.users[accounts.RoleResearcher]
	f.booking, f.start = w.pastBooking(f.inst.ID, w.own.ID, researcher.ID)
	var sp provenance.Specimen
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/specimens", w.tokens[accounts.RoleResearcher],
		map[string]any{"project_id": w.own.ID, "code": "GB-7", "description": "grain boundary lamella", "fluence_budget_e_per_angstrom2": 100000}, &sp)
	f.specimen = sp
	return f
}

// near reports whether got is within rel (relative) of want.
func near(got, want, rel float64) bool { return math.Abs(got-want) <= rel*math.Abs(want) }

// TestAcquisitionRecordedWithDerivedQuantities is the "done when": an
// acquisition with conditions in mixed units comes back with its derived quantities,
// the tuning and calibrations found for it, and the specimen's budget warning.
func TestAcquisitionRecordedWithDerivedQuantities(t *testing.T) {
	w := newWorld(t)
	f := newAcqFixture(w)
	staff, researcher := w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher]
	inst := "/api/v1/instruments/" + f.inst.ID

	// Staff record the corrector's state two hours before the session, and the
	// calibrations in force: the 80 mm camera length measures 77.4 mm, and the ABF
	// detector's angles were measured directly.
	var tu provenance.Tuning
	w.expect(http.StatusCreated, http.MethodPost, inst+"/tunings", staff, map[string]any{
		"measured_at": f.start.Add(-2 * time.Hour), "accelerating_voltage": "300 kV",
		"coefficients": map[string]any{"C1": map[string]string{"magnitude": "0.7875 nm", "uncertainty": "0.1 nm"}, "C3": "1 µm", "A1": map[string]string{"magnitude": "0.2 nm", "angle": "30 °"}},
	}, &tu)
	var camera, abf provenance.Calibration
	w.expect(http.StatusCreated, http.MethodPost, inst+"/calibrations", staff, map[string]any{
		"kind": "camera_length", "effective_from": f.start.Add(-24 * time.Hour), "nominal_camera_length": "80 mm", "camera_length": "77.4 mm", "uncertainty": 0.01,
	}, &camera)
	w.expect(http.StatusCreated, http.MethodPost, inst+"/calibrations", staff, map[string]any{
		"kind": "detector_angles", "effective_from": f.start.Add(-24 * time.Hour), "detector": "ABF", "inner_angle": "13 mrad", "outer_angle": "24 mrad",
	}, &abf)

	conditions := map[string]any{
		"accelerating_voltage": "300 kV", "beam_current": "50 pA", "convergence_semiangle": "25 mrad", "dwell_time": "2 us",
		"pixel_size": "0.1 Å", "camera_length": "80 mm", "defocus": "-5 nm", "specimen_temperature": "-180 °C",
		"detectors": []map[string]string{{"name": "HAADF"}, {"name": "ABF"}},
	}
	body := map[string]any{"booking_id": f.booking, "specimen_id": f.specimen.ID, "started_at": f.start.Add(30 * time.Minute),
		"ended_at": f.start.Add(40 * time.Minute), "notes": "first frames", "conditions": conditions}
	var a acquisitionView
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions", researcher, body, &a)

	d := a.Derived
	// [computed] REFERENCE.md §1: λ(300 kV) = 1.968749 pm, CODATA 2018.
	if !near(d.WavelengthPm, 1.968749, 1e-6) {
		t.Errorf("wavelength = %v pm, want 1.968749", d.WavelengthPm)
	}
	// [computed] REFERENCE.md §1: 50 pA, 2 µs, 0.1 Å pixel, 1 frame → 62 415.09 e⁻/Å².
	if !near(d.FluenceEPerAngstrom2, 62415.09, 1e-6) || a.FluenceEPerA2 == nil || !near(*a.FluenceEPerA2, 62415.09, 1e-6) {
		t.Errorf("fluence = %v / %v, want 62415.09", d.FluenceEPerAngstrom2, a.FluenceEPerA2)
	}
	// [computed] θ = r/L with the calibrated L: 6 mm / 77.4 mm = 77.519 mrad, 16 mm → 206.72 mrad.
	// Regimes [practice, REFERENCE.md §1]: HAADF from 3α (75 mrad) and 50 mrad; ABF from α/2 to α.
	if len(d.Detectors) != 2 || d.Detectors[0].Name != "HAADF" || !near(d.Detectors[0].InnerMrad, 6/77.4*1e3, 1e-9) ||
		!near(d.Detectors[0].OuterMrad, 16/77.4*1e3, 1e-9) || d.Detectors[0].Regime != "HAADF" {
		t.Errorf("HAADF = %+v", d.Detectors)
	} else if dd := d.Detectors[1]; !near(dd.InnerMrad, 13, 1e-9) || !near(dd.OuterMrad, 24, 1e-9) || dd.Regime != "ABF" {
		t.Errorf("ABF from its calibration = %+v", dd)
	}
	// [computed] REFERENCE.md §1: at 300 kV and 25 mrad the π/4 limit on C1 is 0.7875 nm, so
	// a C1 of exactly that size allows 25 mrad and limits the aperture; C3 = 1 µm alone
	// would allow (4λ/8C3)^¼ = 31.5 mrad.
	if d.LimitingCoefficient != "C1" || !near(d.UsableApertureMrad, 25, 1e-4) {
		t.Errorf("usable aperture = %v mrad limited by %q; want 25 by C1", d.UsableApertureMrad, d.LimitingCoefficient)
	}
	if a.TuningID == nil || *a.TuningID != tu.ID || len(a.CalibrationIDs) != 2 {
		t.Errorf("linked tuning %v, calibrations %v; want %s and 2", a.TuningID, a.CalibrationIDs, tu.ID)
	}
	sources := map[string]bool{}
	for _, ap := range a.Applied {
		sources[ap.Field+" "+ap.Source] = true
	}
	for _, want := range []string{"camera_length calibration", "aberrations tuning", "conditions.detectors[0] instrument", "conditions.detectors[1] calibration"} {
		if !sources[want] {
			t.Errorf("applied lacks %q: %+v", want, a.Applied)
		}
	}
	if len(a.Warnings) != 0 || a.Version != 1 || a.OperatorID != w.users[accounts.RoleResearcher].ID {
		t.Errorf("first acquisition: warnings %v, version %d, operator %s", a.Warnings, a.Version, a.OperatorID)
	}
	// The stored conditions keep the text given beside SI.
	if !contains(a.Conditions, `"text":"2 us"`) || !contains(a.Conditions, `"si":0.000002`) || !contains(a.Conditions, `"text":"80 mm"`) || !contains(a.Conditions, `"text":"6 mm"`) || !contains(a.Conditions, `"text":"13 mrad"`) {
		t.Errorf("stored conditions = %s", a.Conditions)
	}

	// A second acquisition takes the specimen past its budget: accepted, with a warning.
	body["started_at"], body["ended_at"] = f.start.Add(50*time.Minute), f.start.Add(60*time.Minute)
	var b acquisitionView
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions", researcher, body, &b)
	if len(b.Warnings) != 1 || !strings.Contains(b.Warnings[0], "passes its budget") {
		t.Errorf("over-budget warnings = %v", b.Warnings)
	}
	var sp provenance.Specimen
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/specimens/"+f.specimen.ID, researcher, nil, &sp)
	if !near(sp.FluenceUsedEPerA2, 2*62415.09, 1e-6) || sp.Acquisitions != 2 {
		t.Errorf("specimen used %v over %d", sp.FluenceUsedEPerA2, sp.Acquisitions)
	}

	// A correction is a new version; the old one stays in the history.
	body["reason"], body["base_version"] = "dwell was 4 µs", 1
	delete(body, "booking_id")
	conditions["dwell_time"] = "4 µs"
	var c acquisitionView
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions/"+a.ID+"/corrections", researcher, body, &c)
	if c.Version != 2 || !near(c.Derived.FluenceEPerAngstrom2, 2*62415.09, 1e-6) || c.Reason != "dwell was 4 µs" {
		t.Errorf("corrected: version %d fluence %v reason %q", c.Version, c.Derived.FluenceEPerAngstrom2, c.Reason)
	}
	// The first acquisition began on a fresh specimen: its 124 830 e⁻/Å² alone passes the
	// budget of 100 000, whatever came after it.
	if len(c.Warnings) != 1 || !strings.Contains(c.Warnings[0], "cumulative fluence 124830") {
		t.Errorf("corrected warnings = %v", c.Warnings)
	}
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/acquisitions/"+a.ID+"/corrections", researcher, body, nil)
	var hist struct{ Items []acquisitionView }
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/acquisitions/"+a.ID+"/versions", w.tokens[accounts.RoleAuditor], nil, &hist)
	if len(hist.Items) != 2 || !near(hist.Items[0].Derived.FluenceEPerAngstrom2, 62415.09, 1e-6) || hist.Items[1].Version != 2 {
		t.Errorf("history = %+v", hist.Items)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/specimens/"+f.specimen.ID, researcher, nil, &sp)
	if !near(sp.FluenceUsedEPerA2, 3*62415.09, 1e-6) {
		t.Errorf("specimen used after the correction = %v, want the corrected acquisition counted once", sp.FluenceUsedEPerA2)
	}
}

// acquisitionView decodes an acquisition with the derived numbers the tests check.
type acquisitionView struct {
	provenance.Acquisition
	Derived struct {
		WavelengthPm         float64 `json:"wavelength_pm"`
		FluenceEPerAngstrom2 float64 `json:"fluence_e_per_angstrom2"`
		Detectors            []struct {
			Name      string  `json:"name"`
			InnerMrad float64 `json:"inner_mrad"`
			OuterMrad float64 `json:"outer_mrad"`
			Regime    string  `json:"regime"`
		} `json:"detectors"`
		UsableApertureMrad  float64  `json:"usable_aperture_mrad"`
		LimitingCoefficient string   `json:"limiting_coefficient"`
		Warnings            []string `json:"warnings"`
	} `json:"derived"`
}

// TestAcquisitionRefusals: each bad acquisition is refused naming what to change, and
// leaves nothing behind.
func TestAcquisitionRefusals(t *testing.T) {
	w := newWorld(t)
	f := newAcqFixture(w)
	researcher := w.tokens[accounts.RoleResearcher]
	post := func(want int, token string, change func(body, cond map[string]any)) response {
		t.Helper()
		cond := map[string]any{"accelerating_voltage": "300 kV", "beam_current": "50 pA", "camera_length": "80 mm"}
		body := map[string]any{"booking_id": f.booking, "started_at": f.start.Add(time.Hour), "ended_at": f.start.Add(2 * time.Hour), "conditions": cond}
		change(body, cond)
		return w.expect(want, http.MethodPost, "/api/v1/acquisitions", token, body, nil)
	}
	r := post(http.StatusBadRequest, researcher, func(_, c map[string]any) { c["beam_current"] = "50 pX" })
	if !fieldNamed(r, "conditions.beam_current") {
		t.Errorf("unknown unit: %s", r.Body)
	}
	r = post(http.StatusBadRequest, researcher, func(_, c map[string]any) { c["accelerating_voltage"] = "300 mA" })
	if !fieldNamed(r, "conditions.accelerating_voltage") {
		t.Errorf("wrong dimension: %s", r.Body)
	}
	r = post(http.StatusBadRequest, researcher, func(_, c map[string]any) { c["convergence_semiangle"] = "1.2 rad" })
	if !fieldNamed(r, "conditions.convergence_semiangle") {
		t.Errorf("semi-angle ≥ 1 rad: %s", r.Body)
	}
	r = post(http.StatusBadRequest, researcher, func(_, c map[string]any) { c["voltage"] = "300 kV" })
	if !fieldNamed(r, "conditions.voltage") {
		t.Errorf("unknown key: %s", r.Body)
	}
	r = post(http.StatusUnprocessableEntity, researcher, func(_, c map[string]any) { c["accelerating_voltage"] = "200 kV" })
	if !fieldNamed(r, "conditions.accelerating_voltage") || !contains(r.Body, `"rule":"instrument_capability"`) || !contains(r.Body, "80 kV, 300 kV") {
		t.Errorf("voltage not offered: %s", r.Body)
	}
	r = post(http.StatusUnprocessableEntity, researcher, func(_, c map[string]any) {
		c["camera_length"] = "3 m"
		c["detectors"] = []map[string]string{{"name": "DF4"}}
	})
	if !fieldNamed(r, "conditions.camera_length") || !fieldNamed(r, "conditions.detectors[0].name") {
		t.Errorf("camera length and detector the instrument lacks: %s", r.Body)
	}
	r = post(http.StatusUnprocessableEntity, researcher, func(b, _ map[string]any) { b["started_at"] = f.start.Add(-time.Minute) })
	if !contains(r.Body, `"rule":"acquisition_within_booking"`) {
		t.Errorf("start before the booking: %s", r.Body)
	}
	r = post(http.StatusBadRequest, researcher, func(b, _ map[string]any) { b["ended_at"] = w.clock.Now().Add(time.Hour) })
	if !fieldNamed(r, "ended_at") {
		t.Errorf("end in the future: %s", r.Body)
	}
	r = post(http.StatusBadRequest, researcher, func(b, _ map[string]any) { b["specimen_id"] = "not-an-id" })
	if !fieldNamed(r, "specimen_id") {
		t.Errorf("malformed specimen: %s", r.Body)
	}
	// The auditor records nothing; another researcher's booking is not there for them;
	// an agent of another instrument finds no such booking.
	post(http.StatusForbidden, w.tokens[accounts.RoleAuditor], func(_, _ map[string]any) {})
	other := w.login(w.other.Email, testPassword).AccessToken
	post(http.StatusNotFound, other, func(_, _ map[string]any) {})
	post(http.StatusNotFound, w.agent, func(_, _ map[string]any) {})

	var list struct{ Items []provenance.Acquisition }
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/acquisitions?booking_id="+f.booking, researcher, nil, &list)
	if len(list.Items) != 0 {
		t.Errorf("refusals left %d acquisitions behind", len(list.Items))
	}

	// Where staff set the instrument's checks to warnings, the same mismatch is
	// accepted and says so.
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/instruments/"+f.inst.ID+"/condition-limits", w.tokens[accounts.RoleStaff],
		map[string]any{"camera_length_min_m": 0.02, "camera_length_max_m": 2.5, "condition_checks": "warning"}, nil)
	var warned provenance.Acquisition
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions", researcher, map[string]any{"booking_id": f.booking,
		"started_at": f.start.Add(time.Hour), "ended_at": f.start.Add(2 * time.Hour), "conditions": map[string]any{"accelerating_voltage": "300 kV", "camera_length": "3 m"}}, &warned)
	if len(warned.Warnings) != 1 || !strings.Contains(warned.Warnings[0], "camera_length") {
		t.Errorf("camera length outside the range, as a warning: %v", warned.Warnings)
	}
	lenient, err := w.db.CreateInstrument(context.Background(), scheduling.Instrument{Code: "TEM-L", Name: "Lenient TEM", Kind: scheduling.KindTEM,
		Corrector: scheduling.CorrectorNone, Bookable: true, AcceleratingVoltagesV: []float64{200e3}, ConditionChecks: scheduling.ConditionChecksWarning}, "setup", time.Now())
	if err != nil {
		t.Fatal(err)
	}
	bid, start := w.pastBooking(lenient.ID, w.own.ID, w.users[accounts.RoleResearcher].ID)
	var a provenance.Acquisition
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions", researcher, map[string]any{"booking_id": bid,
		"started_at": start.Add(time.Hour), "ended_at": start.Add(2 * time.Hour), "conditions": map[string]any{"accelerating_voltage": 300000}}, &a)
	if len(a.Warnings) != 1 || !strings.HasPrefix(a.Warnings[0], "conditions.accelerating_voltage is not one the instrument offers") {
		t.Errorf("lenient instrument warnings = %v", a.Warnings)
	}
}

// TestDeriveEndpoint checks the derive contract over HTTP against REFERENCE.md §1.
func TestDeriveEndpoint(t *testing.T) {
	w := newWorld(t)
	var d map[string]any
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/derive", w.tokens[accounts.RoleAuditor], map[string]any{
		"accelerating_voltage": "200 kV", "convergence_semiangle": "25 mrad", "aberrations": map[string]string{"C3": "1.0 mm"},
	}, &d)
	// [computed] REFERENCE.md §1: λ(200 kV) = 2.507934 pm, γ = 1.391390, β = 0.695314,
	// σ = 7.28840e-3 rad V⁻¹ nm⁻¹; Scherzer at Cs = 1.0 mm: Δf = −57.827 nm, 0.23390 nm.
	// Each must agree to the digits printed there: within half a unit of the last.
	checks := map[string][2]float64{"wavelength_pm": {2.507934, 5e-7}, "lorentz_factor": {1.391390, 5e-7}, "speed_fraction_of_light": {0.695314, 5e-7},
		"interaction_constant_rad_per_volt_nm": {7.28840e-3, 5e-9}, "scherzer_defocus_nm": {-57.827, 5e-4}, "scherzer_resolution_nm": {0.23390, 5e-6}}
	for k, c := range checks {
		got, _ := d[k].(float64)
		if want := c[0]; math.Abs(got-want) > c[1] {
			t.Errorf("%s = %v, want %v", k, d[k], want)
		}
	}
	if d["constants"] != "CODATA 2018" {
		t.Errorf("constants = %v", d["constants"])
	}
	r := w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/derive", w.tokens[accounts.RoleResearcher], map[string]any{"beam_current": "50 pA"}, nil)
	if !fieldNamed(r, "accelerating_voltage") {
		t.Errorf("missing voltage: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/derive", w.agent, map[string]any{"accelerating_voltage": 300000}, nil)
}

// exerciseAcquisitions calls every acquisition route with success and with an error,
// for TestOpenAPIExamplesExercise.
func exerciseAcquisitions(t *testing.T, w *world) {
	manager, staff, researcher, auditor := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	f := newAcqFixture(w)
	inst := "/api/v1/instruments/" + f.inst.ID

	var limited scheduling.Instrument
	w.expect(http.StatusOK, http.MethodPut, inst+"/condition-limits", staff, map[string]any{"camera_length_min_m": 0.02, "camera_length_max_m": 2.5}, &limited)
	if limited.ConditionChecks != scheduling.ConditionChecksError || *limited.CameraLengthMaxM != 2.5 {
		t.Errorf("limits set: %+v", limited)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodPut, inst+"/condition-limits", staff, map[string]any{"camera_length_min_m": 3, "camera_length_max_m": 2.5}, nil); !fieldNamed(r, "camera_length_max_m") {
		t.Errorf("inverted range: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/derive", researcher, map[string]any{"accelerating_voltage": "300 kV"}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/derive", researcher, map[string]any{"accelerating_voltage": "300 kA"}, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/facility/optics-settings", auditor, nil, nil)
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/facility/optics-settings", "", nil, nil)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/facility/optics-settings", manager, map[string]any{"haadf_inner_min_rad": 0.05}, nil)
	if r := w.expect(http.StatusBadRequest, http.MethodPut, "/api/v1/facility/optics-settings", manager, map[string]any{"abf_inner_fraction": 1.5}, nil); !fieldNamed(r, "abf_inner_fraction") {
		t.Errorf("bad settings: %s", r.Body)
	}

	w.expect(http.StatusOK, http.MethodGet, "/api/v1/specimens?project_id="+w.own.ID, researcher, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/specimens?project_id=nope", researcher, nil, nil)
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/specimens", researcher, map[string]any{"project_id": w.own.ID, "code": "GB-7"}, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/specimens/"+f.specimen.ID, auditor, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/specimens/"+w.own.ID, auditor, nil, nil)

	var tu provenance.Tuning
	w.expect(http.StatusCreated, http.MethodPost, inst+"/tunings", staff, map[string]any{"measured_at": f.start, "coefficients": map[string]string{"C3": "-0.5 µm"}}, &tu)
	if r := w.expect(http.StatusBadRequest, http.MethodPost, inst+"/tunings", staff, map[string]any{"measured_at": f.start, "coefficients": map[string]string{"Q9": "1 nm"}}, nil); !fieldNamed(r, "coefficients.Q9") {
		t.Errorf("unknown coefficient: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodGet, inst+"/tunings", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/instruments/"+f.inst.ID+"/tunings", w.agent, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/tunings/"+tu.ID, researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/tunings/"+w.own.ID, researcher, nil, nil)
	w.expect(http.StatusCreated, http.MethodPost, inst+"/calibrations", staff, map[string]any{"kind": "detector_angles", "effective_from": f.start.Add(-time.Hour),
		"detector": "HAADF", "inner_angle": "70 mrad", "outer_angle": "200 mrad"}, nil)
	if r := w.expect(http.StatusBadRequest, http.MethodPost, inst+"/calibrations", staff, map[string]any{"kind": "detector_angles", "effective_from": f.start,
		"detector": "DF9", "inner_angle": "70 mrad", "outer_angle": "200 mrad"}, nil); !fieldNamed(r, "detector") {
		t.Errorf("unknown detector: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodGet, inst+"/calibrations?at="+f.start.Format(time.RFC3339), researcher, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, inst+"/calibrations?at=yesterday", researcher, nil, nil)

	body := map[string]any{"booking_id": f.booking, "specimen_id": f.specimen.ID, "started_at": f.start.Add(time.Minute), "ended_at": f.start.Add(time.Hour),
		"conditions": map[string]any{"accelerating_voltage": "300 kV", "beam_current": "20 pA", "convergence_semiangle": "30 mrad", "dwell_time": "1 µs",
			"pixel_size": "20 pm", "detectors": []map[string]string{{"name": "HAADF"}}}}
	var a provenance.Acquisition
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions", researcher, body, &a)
	w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/acquisitions", researcher, map[string]any{"booking_id": f.booking,
		"started_at": f.start.Add(-time.Hour), "ended_at": f.start, "conditions": map[string]any{"accelerating_voltage": "300 kV"}}, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/acquisitions?specimen_id="+f.specimen.ID, researcher, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/acquisitions?limit=0", researcher, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/acquisitions/"+a.ID, auditor, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/acquisitions/"+f.booking, auditor, nil, nil)
	delete(body, "booking_id")
	body["reason"], body["base_version"] = "the pixel was 25 pm", 1
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions/"+a.ID+"/corrections", staff, body, nil)
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/acquisitions/"+a.ID+"/corrections", staff, body, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/acquisitions/"+a.ID+"/versions", researcher, nil, nil)
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/acquisitions/"+a.ID+"/versions", "", nil, nil)
}
