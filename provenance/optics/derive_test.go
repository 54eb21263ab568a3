package optics

import (
	"encoding/json"
	"math"
	"strings"
	"testing"
)

func TestDetectorRegime(t *testing.T) {
	s := DefaultSettings()
	cases := []struct {
		inner, outer, alpha float64
		want                Regime
	}{
		// Boundaries [practice]: BF outer ≤ α; ABF about α/2 to α; LAADF inner just
		// outside α up to about 3α or 50 mrad; HAADF inner ≥ 3α and ≥ 50 mrad.
		{0, 20e-3, 25e-3, RegimeBF},         // [practice] disc inside α
		{0, 25e-3, 25e-3, RegimeBF},         // [practice] outer = α still BF
		{12.5e-3, 25e-3, 25e-3, RegimeABF},  // [practice] α/2 to α
		{11e-3, 24e-3, 25e-3, RegimeBF},     // [practice] reaches below α/2: BF
		{30e-3, 80e-3, 25e-3, RegimeLAADF},  // [practice] just outside α
		{74e-3, 200e-3, 25e-3, RegimeLAADF}, // [practice] below 3α = 75 mrad
		{75e-3, 200e-3, 25e-3, RegimeHAADF}, // [practice] at 3α and above 50 mrad
		{40e-3, 200e-3, 10e-3, RegimeLAADF}, // [practice] above 3α but below 50 mrad
		{50e-3, 200e-3, 10e-3, RegimeHAADF}, // [practice] 50 mrad and 5α
		{20e-3, 100e-3, 25e-3, RegimeMixed}, // [practice] straddles the disc edge
		{0, 125e-3, 25e-3, RegimeMixed},     // [practice] a disc wider than the BF disc
	}
	for _, c := range cases {
		if got := s.DetectorRegime(c.inner, c.outer, c.alpha); got != c.want {
			t.Errorf("regime(%g–%g rad, α=%g) = %s, want %s", c.inner, c.outer, c.alpha, got, c.want)
		}
	}
	// A facility that draws HAADF from 4α moves the boundary. [constructed]
	s.HAADFInnerMultiple = 4
	if got := s.DetectorRegime(75e-3, 200e-3, 25e-3); got != RegimeLAADF {
		t.Errorf("with HAADF from 4α, 75 mrad at α = 25 mrad is %s, want LAADF", got)
	}
}

func TestSettingsValidate(t *testing.T) {
	if err := DefaultSettings().Validate(); err != nil {
		t.Fatalf("defaults invalid: %v", err)
	}
	for _, c := range []struct {
		mutate func(*Settings)
		field  string
	}{
		{func(s *Settings) { s.ABFInnerFraction = 0 }, "abf_inner_fraction"},
		{func(s *Settings) { s.ABFInnerFraction = 1 }, "abf_inner_fraction"},
		{func(s *Settings) { s.ABFInnerFraction = math.NaN() }, "abf_inner_fraction"},
		{func(s *Settings) { s.HAADFInnerMultiple = 0.9 }, "haadf_inner_multiple"},
		{func(s *Settings) { s.HAADFInnerMinRad = -1 }, "haadf_inner_min_rad"},
		{func(s *Settings) { s.HAADFInnerMinRad = 2 }, "haadf_inner_min_rad"},
	} {
		s := DefaultSettings()
		c.mutate(&s)
		if err := s.Validate(); err == nil || !strings.Contains(err.Error(), c.field) {
			t.Errorf("Validate(%+v) = %v, want an error naming %s", s, err, c.field)
		}
	}
	var s Settings
	if err := json.Unmarshal([]byte(`{"abf_inner_fraction":0.4,"haadf_inner_multiple":3.5,"haadf_inner_min_rad":0.06}`), &s); err != nil ||
		s != (Settings{0.4, 3.5, 0.06}) {
		t.Errorf("settings JSON: %+v, %v", s, err)
	}
}

// stemInputs is a [constructed] STEM acquisition at 300 kV and α = 25 mrad.
func stemInputs() Inputs {
	return Inputs{
		VoltageV: 300e3, BeamCurrentA: 50e-12, SemiAngleRad: 25e-3, DwellS: 2e-6,
		PixelSizeM: 0.1e-10, FrameCount: 1, FrameTimeS: 0.5, CameraLengthM: 80e-3,
		Detectors: []DetectorInput{
			{Name: "BF", InnerRadiusM: 0, OuterRadiusM: 1.6e-3},
			{Name: "HAADF", InnerRadiusM: 8e-3, OuterRadiusM: 16e-3},
			{Name: "ADF", InnerAngleRad: 20e-3, OuterAngleRad: 100e-3, ByAngle: true},
		},
		Aberrations: []AberrationInput{{"C3", 2e-6}, {"C1", 1e-9}},
	}
}

func TestDeriveSTEM(t *testing.T) {
	d := Derive(stemInputs(), DefaultSettings())
	checks := []struct {
		name           string
		got            *float64
		want, halfUnit float64
	}{
		{"wavelength_pm", d.WavelengthPm, 1.968749, 0.5e-6},                              // [computed, CODATA 2018] 300 kV
		{"lorentz_factor", d.LorentzFactor, 1.587085, 0.5e-6},                            // [computed, CODATA 2018] 300 kV
		{"speed_fraction_of_light", d.SpeedFractionOfLight, 0.776525, 0.5e-6},            // [computed, CODATA 2018] 300 kV
		{"probe_diameter_diffraction_pm", d.ProbeDiameterDiffractionPm, 96.075, 0.5e-3},  // [computed] 1.22λ/α = 0.96075 Å
		{"nyquist_pixel_adf_pm", d.NyquistPixelADFPm, 19.687, 0.5e-3},                    // [computed] λ/4α = 0.19687 Å
		{"fluence_e_per_angstrom2", d.FluenceEPerAngstrom2, 62415.09, 0.005},             // [computed] 50 pA, 2 µs, 0.1 Å
		{"fluence_rate_e_per_angstrom2_s", d.FluenceRateEPerAngstrom2S, 124830.18, 0.01}, // [computed] 62 415.09 per frame over a [constructed] 0.5 s frame
	}
	for _, c := range checks {
		if c.got == nil || !near(*c.got, c.want, c.halfUnit) {
			t.Errorf("%s = %v, want %v", c.name, deref(c.got), c.want)
		}
	}
	if d.Sampling != SamplingAdequate { // [computed] 10 pm pixel < 19.687 pm
		t.Errorf("sampling = %q, want adequate", d.Sampling)
	}
	wantDet := []DetectorAngles{
		{"BF", 0, 20, RegimeBF},          // [computed] 1.6 mm / 80 mm = 20 mrad; [practice] BF
		{"HAADF", 100, 200, RegimeHAADF}, // [computed] 8 mm and 16 mm at 80 mm; [practice] HAADF
		{"ADF", 20, 100, RegimeMixed},    // [practice] straddles α = 25 mrad
	}
	if len(d.Detectors) != len(wantDet) {
		t.Fatalf("detectors = %+v", d.Detectors)
	}
	for i, w := range wantDet {
		g := d.Detectors[i]
		if g.Name != w.Name || !near(g.InnerMrad, w.InnerMrad, 1e-9) || !near(g.OuterMrad, w.OuterMrad, 1e-9) || g.Regime != w.Regime {
			t.Errorf("detector %d = %+v, want %+v", i, g, w)
		}
	}
	if !hasWarning(d, "ADF (20–100 mrad) straddles") {
		t.Errorf("no warning about the straddling ADF detector: %q", d.Warnings)
	}
	// Reported in table order: C1 before C3 whatever the input order.
	if len(d.AberrationLimits) != 2 || d.AberrationLimits[0].Coefficient != "C1" || d.AberrationLimits[1].Coefficient != "C3" {
		t.Fatalf("aberration_limits = %+v", d.AberrationLimits)
	}
	c1, c3 := d.AberrationLimits[0], d.AberrationLimits[1]
	if c1.LimitAtApertureNm == nil || !near(*c1.LimitAtApertureNm, 0.7875, 0.5e-4) { // [computed] |C1| ≤ 0.7875 nm at 300 kV, 25 mrad
		t.Errorf("C1 limit = %v, want 0.7875 nm", deref(c1.LimitAtApertureNm))
	}
	if c3.LimitAtApertureNm == nil || !near(*c3.LimitAtApertureNm, 2520, 0.5) { // [computed] |C3| ≤ 2.520 µm at 300 kV, 25 mrad
		t.Errorf("C3 limit = %v, want 2520 nm", deref(c3.LimitAtApertureNm))
	}
	// C3 = 2 µm is under its 2.520 µm limit at 25 mrad, C1 = 1 nm is over its 0.7875 nm:
	// C1 limits the aperture, below 25 mrad, and the probe is too wide for it.
	if d.LimitingCoefficient != "C1" || d.UsableApertureMrad == nil || !(*d.UsableApertureMrad < 25) { // [constructed] inputs; [computed] π/4 limits above
		t.Errorf("limiting %q at %v mrad, want C1 below 25", d.LimitingCoefficient, deref(d.UsableApertureMrad))
	}
	if !hasWarning(d, "larger than the usable aperture") {
		t.Errorf("no usable-aperture warning: %q", d.Warnings)
	}
	for _, key := range []string{"wavelength", "angles", "fluence", "aberration_criterion", "aberration_notation", "scherzer", "defocus_sign"} {
		if d.Conventions[key] == "" {
			t.Errorf("convention %q not named: %v", key, d.Conventions)
		}
	}
	if d.Constants != "CODATA 2018" {
		t.Errorf("constants = %q", d.Constants)
	}
}

func TestDeriveUndersampledAndTEM(t *testing.T) {
	in := Inputs{VoltageV: 300e3, SemiAngleRad: 25e-3, PixelSizeM: 0.2e-10, BeamCurrentA: 1e-9, ExposureS: 2, IlluminatedDiameterM: 1e-6}
	d := Derive(in, DefaultSettings())
	if d.Sampling != SamplingUndersampled || !hasWarning(d, "larger than the ADF Nyquist pixel") { // [computed] 20 pm > 19.687 pm
		t.Errorf("sampling %q, warnings %q; want undersampled with a warning", d.Sampling, d.Warnings)
	}
	// No dwell: TEM fluence from current, exposure and area. [computed] 79.46936 e⁻/Å² per nA·s over 1 µm.
	if d.FluenceEPerAngstrom2 == nil || !near(*d.FluenceEPerAngstrom2, 2*79.46936, 1e-5) {
		t.Errorf("TEM fluence = %v, want %v", deref(d.FluenceEPerAngstrom2), 2*79.46936)
	}
	if d.FluenceRateEPerAngstrom2S == nil || !near(*d.FluenceRateEPerAngstrom2S, 79.46936, 0.5e-5) { // [computed] fluence / exposure
		t.Errorf("TEM fluence rate = %v", deref(d.FluenceRateEPerAngstrom2S))
	}
}

// A Haider B2 of 1 µm is the Krivanek C21 of 3 µm (REFERENCE.md §1: C_{2,1} = 3|B2|):
// same usable angle, and a B2 limit a third of the C21 limit.
func TestDeriveHaiderFactor(t *testing.T) {
	b := Derive(Inputs{VoltageV: 300e3, SemiAngleRad: 25e-3, Aberrations: []AberrationInput{{"B2", 1e-6}}}, DefaultSettings())
	c := Derive(Inputs{VoltageV: 300e3, SemiAngleRad: 25e-3, Aberrations: []AberrationInput{{"C21", 3e-6}}}, DefaultSettings())
	bl, cl := b.AberrationLimits[0], c.AberrationLimits[0]
	if bl.Order != 2 || cl.Order != 2 {
		t.Errorf("orders %d, %d; want 2", bl.Order, cl.Order)
	}
	if !near(*bl.UsableAngleMrad, *cl.UsableAngleMrad, 1e-12) || !near(*bl.UsableAngleMrad, 6.266621, 0.5e-6) { // [computed] ((3λ/(8·3 µm))^⅓ at 300 kV
		t.Errorf("usable angle B2 = 1 µm: %v mrad; C21 = 3 µm: %v mrad; want both 6.266621", *bl.UsableAngleMrad, *cl.UsableAngleMrad)
	}
	if !near(*cl.LimitAtApertureNm, 47.24997, 0.5e-5) || !near(3**bl.LimitAtApertureNm, *cl.LimitAtApertureNm, 1e-9) { // [computed] 3λ/(8α³) at 300 kV, 25 mrad
		t.Errorf("limits B2 %v nm, C21 %v nm; want C21 = 3·B2 = 47.24997", *bl.LimitAtApertureNm, *cl.LimitAtApertureNm)
	}
}

func TestDeriveScherzer(t *testing.T) {
	d := Derive(Inputs{VoltageV: 200e3, Aberrations: []AberrationInput{{"C3", 1e-3}}}, DefaultSettings())
	if d.ScherzerDefocusNm == nil || !near(*d.ScherzerDefocusNm, -57.827, 0.5e-3) { // [computed] Scherzer at 200 kV, Cs = 1.0 mm
		t.Errorf("scherzer_defocus_nm = %v, want −57.827", deref(d.ScherzerDefocusNm))
	}
	if d.ScherzerResolutionNm == nil || !near(*d.ScherzerResolutionNm, 0.23390, 0.5e-5) { // [computed] 0.66·0.354395 nm
		t.Errorf("scherzer_resolution_nm = %v, want 0.23390", deref(d.ScherzerResolutionNm))
	}
	if d.AberrationLimits[0].LimitAtApertureNm != nil || d.Detectors != nil { // [constructed] no α: no limit at the aperture
		t.Errorf("limit at aperture without α: %+v", d.AberrationLimits[0])
	}
	neg := Derive(Inputs{VoltageV: 200e3, Aberrations: []AberrationInput{{"C3", -5e-6}}}, DefaultSettings())
	if neg.ScherzerDefocusNm != nil || !hasWarning(neg, "C3 is not positive") { // [constructed] negative Cs has no Scherzer condition in this form
		t.Errorf("negative C3: defocus %v, warnings %q", deref(neg.ScherzerDefocusNm), neg.Warnings)
	}
}

// Only the keys whose inputs are present appear, warnings are never null, and nothing
// unencodable (Inf, NaN) reaches the JSON.
func TestDeriveJSON(t *testing.T) {
	b, err := json.Marshal(Derive(Inputs{VoltageV: 100e3}, DefaultSettings()))
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"wavelength_pm", "lorentz_factor", "speed_fraction_of_light", "interaction_constant_rad_per_volt_nm", "constants", "conventions", "warnings"} {
		if _, ok := m[k]; !ok {
			t.Errorf("key %s missing from %s", k, b)
		}
	}
	for _, k := range []string{"probe_diameter_diffraction_pm", "sampling", "fluence_e_per_angstrom2", "detectors", "aberration_limits", "scherzer_defocus_nm", "usable_aperture_mrad"} {
		if _, ok := m[k]; ok {
			t.Errorf("key %s present without its inputs: %s", k, b)
		}
	}
	if w, ok := m["warnings"].([]any); !ok || len(w) != 0 {
		t.Errorf("warnings = %#v, want []", m["warnings"])
	}
	// A semi-angle so small that λ/α overflows is dropped with a warning, not encoded.
	d := Derive(Inputs{VoltageV: 100e3, SemiAngleRad: 5e-324}, DefaultSettings())
	if _, err := json.Marshal(d); err != nil || d.ProbeDiameterDiffractionPm != nil || len(d.Warnings) == 0 { // [constructed]
		t.Errorf("overflowing probe size: %v, %v, %q", err, deref(d.ProbeDiameterDiffractionPm), d.Warnings)
	}
}

func hasWarning(d Derived, sub string) bool {
	for _, w := range d.Warnings {
		if strings.Contains(w, sub) {
			return true
		}
	}
	return false
}

func deref(p *float64) any {
	if p == nil {
		return nil
	}
	return *p
}
