package main

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// deriveRun runs `beamledger derive args…` with input on stdin, as main would.
func deriveRun(t *testing.T, input string, args ...string) (map[string]any, error) {
	t.Helper()
	var out, errOut bytes.Buffer
	err := runWithStdin(context.Background(), append([]string{"derive"}, args...), strings.NewReader(input), &out, &errOut)
	var m map[string]any
	if out.Len() > 0 {
		dec := json.NewDecoder(&out)
		if derr := dec.Decode(&m); derr != nil || dec.More() {
			t.Fatalf("stdout is not one JSON object (%v): %s", derr, out.String())
		}
	}
	return m, err
}

func TestDeriveGoodInput(t *testing.T) {
	m, err := deriveRun(t, `{
		"accelerating_voltage": "300 kV", "beam_current": "50 pA", "convergence_semiangle": "25 mrad",
		"dwell_time": "2 µs", "pixel_size": "0.1 Å", "frame_time": "0.5 s", "camera_length": "80 mm",
		"detectors": [{"name": "HAADF", "inner_radius": "2 mm", "outer_radius": "10 mm"}],
		"aberrations": {"C1": "0.5 nm", "C3": "1.2 µm"},
		"defocus": "-10 nm", "specimen_temperature": "-180 °C", "extra": {"holder": "cryo"}}`)
	if err != nil {
		t.Fatalf("derive: %v", err)
	}
	for _, k := range []string{"wavelength_pm", "lorentz_factor", "speed_fraction_of_light", "interaction_constant_rad_per_volt_nm",
		"probe_diameter_diffraction_pm", "nyquist_pixel_adf_pm", "nyquist_pixel_bf_pm", "sampling",
		"fluence_e_per_angstrom2", "fluence_rate_e_per_angstrom2_s", "detectors", "aberration_limits",
		"usable_aperture_mrad", "limiting_coefficient", "scherzer_defocus_nm", "scherzer_resolution_nm",
		"constants", "conventions", "warnings"} {
		if _, ok := m[k]; !ok {
			t.Errorf("output lacks %q", k)
		}
	}
	num := func(k string) float64 { f, _ := m[k].(float64); return f }
	if got := num("wavelength_pm"); math.Abs(got-1.968749) > 0.5e-6 { // [computed, CODATA 2018] λ at 300 kV
		t.Errorf("wavelength_pm = %v, want 1.968749", got)
	}
	if got := num("fluence_e_per_angstrom2"); math.Abs(got-62415.09) > 0.005 { // [computed] 50 pA, 2 µs, 0.1 Å, 1 frame → 62 415.09 e⁻/Å²
		t.Errorf("fluence = %v, want 62415.09", got)
	}
	if got := num("probe_diameter_diffraction_pm"); math.Abs(got-96.075) > 0.5e-3 { // [computed] 1.22λ/α = 0.96075 Å at 300 kV, 25 mrad
		t.Errorf("probe diameter = %v pm, want 96.075", got)
	}
	det := m["detectors"].([]any)[0].(map[string]any)
	if det["name"] != "HAADF" || math.Abs(det["inner_mrad"].(float64)-25.000) > 0.5e-3 || math.Abs(det["outer_mrad"].(float64)-125.00) > 0.5e-2 { // [computed] r = 2 mm, 10 mm at L = 80 mm → 25.000, 125.00 mrad
		t.Errorf("detector = %v", det)
	}
	if det["regime"] != "LAADF" { // [practice] inner at α = 25 mrad, below 3α and 50 mrad
		t.Errorf("regime = %v, want LAADF", det["regime"])
	}
	if m["constants"] != "CODATA 2018" || m["sampling"] != "adequate" {
		t.Errorf("constants %v, sampling %v", m["constants"], m["sampling"])
	}
}

// The smallest input: only the voltage, only the voltage's keys, and warnings as [].
func TestDeriveVoltageOnly(t *testing.T) {
	m, err := deriveRun(t, `{"accelerating_voltage": 100000}`)
	if err != nil {
		t.Fatal(err)
	}
	if got := m["wavelength_pm"].(float64); math.Abs(got-3.701437) > 0.5e-6 { // [computed, CODATA 2018] λ at 100 kV
		t.Errorf("wavelength_pm = %v", got)
	}
	if _, ok := m["fluence_e_per_angstrom2"]; ok {
		t.Error("fluence reported without its inputs")
	}
	if w, ok := m["warnings"].([]any); !ok || len(w) != 0 {
		t.Errorf("warnings = %#v, want []", m["warnings"])
	}
}

func TestDeriveBadInput(t *testing.T) {
	cases := []struct {
		input string
		field string
	}{
		{`{"accelerating_voltage": "300 mA"}`, "accelerating_voltage"},
		{`{"accelerating_voltage": "300 kV", "beam_current": "-1 pA"}`, "beam_current"},
		{`{"accelerating_voltage": "300 kV", "detectors": [{"name": "A", "inner_angle": "1 mrad", "outer_angle": "2 mrad"}, {"name": "B", "inner_radius": "1 mm", "outer_radius": "2 mm"}]}`, "detectors[1].inner_radius"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"C7": "1 mm"}}`, "aberrations.C7"},
		{`{"accelerating_voltage": "300 kV", "flux": 3}`, "flux"},
		{`not json`, "conditions"},
		{``, "conditions"},
	}
	for _, c := range cases {
		m, err := deriveRun(t, c.input)
		if code := exitCode(err); err == nil || code != 2 {
			t.Errorf("%s: err %v, exit %d; want exit 2", c.input, err, code)
		}
		body, _ := m["error"].(map[string]any)
		fields, _ := body["fields"].(map[string]any)
		if body["code"] != "invalid" || body["message"] == "" || fields[c.field] == nil {
			t.Errorf("%s: error body %v does not name %s", c.input, m, c.field)
		}
		if rid, ok := body["request_id"]; !ok || rid != "" {
			t.Errorf("%s: request_id = %v, want present and empty as in the server's body", c.input, rid)
		}
	}
}

func TestDeriveSettings(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(body), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	in := `{"accelerating_voltage": "300 kV", "convergence_semiangle": "25 mrad",
		"detectors": [{"name": "ADF", "inner_angle": "75 mrad", "outer_angle": "200 mrad"}]}`
	regime := func(m map[string]any) any { return m["detectors"].([]any)[0].(map[string]any)["regime"] }
	m, err := deriveRun(t, in)
	if err != nil || regime(m) != "HAADF" { // [practice] inner ≥ 3α and ≥ 50 mrad
		t.Fatalf("default regime %v, %v; want HAADF", regime(m), err)
	}
	m, err = deriveRun(t, in, "-settings", write("s.json", `{"haadf_inner_multiple": 4}`))
	if err != nil || regime(m) != "LAADF" { // [constructed] a facility drawing HAADF from 4α
		t.Errorf("with HAADF from 4α: %v, %v; want LAADF", regime(m), err)
	}
	for _, bad := range []string{`{"haadf_inner_multiple": 0.5}`, `{"haadf_multiple": 4}`, `[]`} {
		m, err = deriveRun(t, in, "-settings", write("bad.json", bad))
		if exitCode(err) != 2 || m["error"] == nil {
			t.Errorf("settings %s: err %v, out %v; want the error body and exit 2", bad, err, m)
		}
	}
	if _, err := deriveRun(t, in, "-nosuchflag"); exitCode(err) != 2 {
		t.Errorf("unknown flag: exit %d, want 2", exitCode(err))
	}
}

func TestExitCode(t *testing.T) {
	if exitCode(errors.New("broken pipe")) != 1 || exitCode(&exitError{2, errors.New("bad")}) != 2 {
		t.Error("exitCode does not tell failures from refused input")
	}
}
