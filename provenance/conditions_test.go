package provenance

import (
	"encoding/json"
	"errors"
	"math"
	"reflect"
	"strings"
	"testing"

	"beamledger"
	"beamledger/provenance/optics"
)

// mixedInput is a [constructed] STEM acquisition written the ways people write it.
const mixedInput = `{
	"accelerating_voltage": "300 kV",
	"beam_current": "50 pA",
	"convergence_semiangle": "1.5e-3 rad",
	"dwell_time": "2 µs",
	"pixel_size": "0.1 Å",
	"frame_count": 4,
	"frame_time": 0.5,
	"camera_length": "80 mm",
	"exposure_time": "2 us",
	"illuminated_diameter": "1.5 µm",
	"defocus": "-57.8 nm",
	"specimen_temperature": "-180 °C",
	"detectors": [
		{"name": "HAADF", "inner_radius": "4 mm", "outer_radius": "10 mm"},
		{"name": "BF", "inner_angle": 0, "outer_angle": "0.5°"},
		{"name": "ABF"}
	],
	"aberrations": {
		"C1": "-2 nm",
		"A1": {"magnitude": "1.5 nm", "angle": "30°", "uncertainty": "0.2 nm"},
		"C3": "1.2 µm",
		"C21": 3e-6
	},
	"extra": {"holder": "cryo double tilt", "mode": "STEM"},
	"frame_time_note": null
}`

func TestParseConditionsMixedUnits(t *testing.T) {
	c, err := ParseConditions([]byte(withoutNote()))
	if err != nil {
		t.Fatal(err)
	}
	// Exact decimal conversions by the SI prefixes [published: BIPM SI Brochure, 9th ed., Table 7].
	checks := []struct {
		name string
		got  *Quantity
		si   float64
		unit string
		text string
	}{
		{"accelerating_voltage", &c.AcceleratingVoltage, 300e3, "V", "300 kV"},
		{"beam_current", c.BeamCurrent, 50e-12, "A", "50 pA"},
		{"convergence_semiangle", c.ConvergenceSemiangle, 1.5e-3, "rad", "1.5e-3 rad"},
		{"dwell_time", c.DwellTime, 2e-6, "s", "2 µs"},
		{"pixel_size", c.PixelSize, 1e-11, "m", "0.1 Å"},
		{"frame_time", c.FrameTime, 0.5, "s", "0.5"},
		{"camera_length", c.CameraLength, 80e-3, "m", "80 mm"},
		{"exposure_time", c.ExposureTime, 2e-6, "s", "2 us"},
		{"illuminated_diameter", c.IlluminatedDiameter, 1.5e-6, "m", "1.5 µm"},
		{"defocus", c.Defocus, -57.8e-9, "m", "-57.8 nm"},
		{"detectors[0].inner_radius", c.Detectors[0].InnerRadius, 4e-3, "m", "4 mm"},
		{"detectors[1].inner_angle", c.Detectors[1].InnerAngle, 0, "rad", "0"},
		{"aberrations.C1", ptr(c.Aberrations["C1"].Magnitude), -2e-9, "m", "-2 nm"},
		{"aberrations.A1.uncertainty", c.Aberrations["A1"].Uncertainty, 0.2e-9, "m", "0.2 nm"},
		{"aberrations.C21", ptr(c.Aberrations["C21"].Magnitude), 3e-6, "m", "3e-6"},
	}
	for _, k := range checks {
		if k.got == nil || *k.got != (Quantity{k.si, k.unit, k.text}) {
			t.Errorf("%s = %+v, want {%v %s %q}", k.name, k.got, k.si, k.unit, k.text)
		}
	}
	// Non-decimal conversions to a tolerance: 0 °C = 273.15 K and 1° = π/180 rad
	// [published: BIPM SI Brochure, 9th ed., Tables 4 and 8].
	if got := c.SpecimenTemperature.SI; math.Abs(got-93.15) > 1e-12 || c.SpecimenTemperature.Unit != "K" {
		t.Errorf("specimen_temperature = %+v, want 93.15 K", *c.SpecimenTemperature)
	}
	if got := c.Detectors[1].OuterAngle.SI; math.Abs(got-0.5*math.Pi/180) > 1e-18 {
		t.Errorf("0.5° = %v rad", got)
	}
	if got := c.Aberrations["A1"].Angle.SI; math.Abs(got-math.Pi/6) > 1e-15 {
		t.Errorf("30° = %v rad", got)
	}
	if c.FrameCount == nil || *c.FrameCount != 4 {
		t.Errorf("frame_count = %v", c.FrameCount)
	}
	if got := c.DetectorNames(); !reflect.DeepEqual(got, []string{"HAADF", "BF", "ABF"}) {
		t.Errorf("DetectorNames() = %q", got)
	}
	if l, ok := c.CameraLengthM(); !ok || l != 80e-3 {
		t.Errorf("CameraLengthM() = %v, %v", l, ok)
	}
	if c.VoltageV() != 300e3 {
		t.Errorf("VoltageV() = %v", c.VoltageV())
	}
	if c.Extra["holder"] != "cryo double tilt" || len(c.Extra) != 2 {
		t.Errorf("extra = %v", c.Extra)
	}
}

// withoutNote is mixedInput less its unknown (null) key.
func withoutNote() string {
	return strings.Replace(mixedInput, `,
	"frame_time_note": null`, "", 1)
}

func manyExtra(n int) string {
	kv := make([]string, n)
	for i := range kv {
		kv[i] = `"k` + strings.Repeat("x", i) + `": "v"`
	}
	return strings.Join(kv, ", ")
}

func ptr(q Quantity) *Quantity { return &q }

// Null counts as absent: producers write it for "not measured".
func TestParseConditionsNull(t *testing.T) {
	c, err := ParseConditions([]byte(`{"accelerating_voltage": 200000, "beam_current": null}`))
	if err != nil || c.BeamCurrent != nil || c.AcceleratingVoltage != (Quantity{200e3, "V", "200000"}) {
		t.Errorf("got %+v, %v", c, err)
	}
}

func TestParseConditionsRejects(t *testing.T) {
	cases := []struct {
		json  string
		field string
	}{
		{`{}`, "accelerating_voltage"},
		{`{"accelerating_voltage": "300 mA"}`, "accelerating_voltage"}, // wrong dimension
		{`{"accelerating_voltage": "300 V"}`, "accelerating_voltage"},  // below 1 kV
		{`{"accelerating_voltage": "3.5 MV"}`, "accelerating_voltage"},
		{`{"accelerating_voltage": "300 kv"}`, "accelerating_voltage"}, // case matters
		{`{"accelerating_voltage": "NaN V"}`, "accelerating_voltage"},
		{`{"accelerating_voltage": 1e999}`, "accelerating_voltage"},
		{`{"accelerating_voltage": true}`, "accelerating_voltage"},
		{`{"accelerating_voltage": "300"}`, "accelerating_voltage"},
		{`{"accelerating_voltage": "300 kV", "beam_current": "-5 pA"}`, "beam_current"},
		{`{"accelerating_voltage": "300 kV", "beam_current": "0 A"}`, "beam_current"},
		{`{"accelerating_voltage": "300 kV", "beam_current": "2 mA"}`, "beam_current"},
		{`{"accelerating_voltage": "300 kV", "convergence_semiangle": "1 rad"}`, "convergence_semiangle"},
		{`{"accelerating_voltage": "300 kV", "convergence_semiangle": "0 mrad"}`, "convergence_semiangle"},
		{`{"accelerating_voltage": "300 kV", "convergence_semiangle": "90°"}`, "convergence_semiangle"},
		{`{"accelerating_voltage": "300 kV", "dwell_time": "2 h"}`, "dwell_time"},
		{`{"accelerating_voltage": "300 kV", "dwell_time": "2 mm"}`, "dwell_time"},
		{`{"accelerating_voltage": "300 kV", "pixel_size": "0.1 A"}`, "pixel_size"}, // ampere, not ångström
		{`{"accelerating_voltage": "300 kV", "pixel_size": "-1 nm"}`, "pixel_size"},
		{`{"accelerating_voltage": "300 kV", "frame_count": 0}`, "frame_count"},
		{`{"accelerating_voltage": "300 kV", "frame_count": 2.5}`, "frame_count"},
		{`{"accelerating_voltage": "300 kV", "frame_count": "10"}`, "frame_count"},
		{`{"accelerating_voltage": "300 kV", "frame_time": "0 s"}`, "frame_time"},
		{`{"accelerating_voltage": "300 kV", "camera_length": "-80 mm"}`, "camera_length"},
		{`{"accelerating_voltage": "300 kV", "exposure_time": "2 days"}`, "exposure_time"},
		{`{"accelerating_voltage": "300 kV", "illuminated_diameter": "5 cm"}`, "illuminated_diameter"},
		{`{"accelerating_voltage": "300 kV", "defocus": "2 m"}`, "defocus"},
		{`{"accelerating_voltage": "300 kV", "specimen_temperature": "-300 °C"}`, "specimen_temperature"},
		{`{"accelerating_voltage": "300 kV", "specimen_temperature": "20 °F"}`, "specimen_temperature"},
		{`{"accelerating_voltage": "300 kV", "voltage": "300 kV"}`, "voltage"}, // unknown key
		{mixedInput, "frame_time_note"},                                        // unknown even when null
		{`{"accelerating_voltage": "300 kV", "detectors": {}}`, "detectors"},
		{`{"accelerating_voltage": "300 kV", "detectors": [{"name": "HAADF", "inner_radius": "4 mm", "outer_radius": "10 mm"}]}`, "detectors[0].inner_radius"}, // no camera length
		{`{"accelerating_voltage": "300 kV", "camera_length": "80 mm", "detectors": [{"name": "A", "inner_angle": "10 mrad", "outer_angle": "20 mrad"}, {"name": "B", "inner_radius": "10 mm", "outer_radius": "4 mm"}]}`, "detectors[1].outer_radius"},
		{`{"accelerating_voltage": "300 kV", "camera_length": "80 mm", "detectors": [{"name": "A", "inner_radius": "10 mm", "outer_radius": "20 cm"}]}`, "detectors[0].outer_radius"}, // 2.5 rad
		{`{"accelerating_voltage": "300 kV", "detectors": [{"name": "A", "inner_angle": "10 mrad"}]}`, "detectors[0].outer_angle"},
		{`{"accelerating_voltage": "300 kV", "detectors": [{"name": "A", "inner_angle": "10 mrad", "outer_angle": "2 rad"}]}`, "detectors[0].outer_angle"},
		{`{"accelerating_voltage": "300 kV", "detectors": [{"name": "A", "inner_angle": "10 mm", "outer_angle": "20 mrad"}]}`, "detectors[0].inner_angle"},
		{`{"accelerating_voltage": "300 kV", "camera_length": "80 mm", "detectors": [{"name": "A", "inner_angle": "10 mrad", "outer_radius": "4 mm"}]}`, "detectors[0]"},
		{`{"accelerating_voltage": "300 kV", "detectors": [{"inner_angle": "10 mrad", "outer_angle": "20 mrad"}]}`, "detectors[0].name"},
		{`{"accelerating_voltage": "300 kV", "detectors": [{"name": "A"}, {"name": "A"}]}`, "detectors[1].name"},
		{`{"accelerating_voltage": "300 kV", "detectors": [{"name": "A", "gain": 3}]}`, "detectors[0].gain"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"Cs": "1 mm"}}`, "aberrations.Cs"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"C3": "1 mA"}}`, "aberrations.C3"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"C3": "1 mm", "C30": "1 mm"}}`, "aberrations.C30"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"A1": "-1 nm"}}`, "aberrations.A1"}, // non-round: no sign
		{`{"accelerating_voltage": "300 kV", "aberrations": {"A1": {"angle": "30°"}}}`, "aberrations.A1.magnitude"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"A1": {"magnitude": "1 nm", "angle": "30 mm"}}}`, "aberrations.A1.angle"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"A1": {"magnitude": "1 nm", "uncertainty": "-1 nm"}}}`, "aberrations.A1.uncertainty"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"C3": {"magnitude": "1 nm", "angle": "3°"}}}`, "aberrations.C3.angle"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"A1": {"magnitude": "1 nm", "phase": "3°"}}}`, "aberrations.A1.phase"},
		{`{"accelerating_voltage": "300 kV", "aberrations": {"C5": "2 m"}}`, "aberrations.C5"},
		{`{"accelerating_voltage": "300 kV", "extra": {"holder": 3}}`, "extra.holder"},
		{`{"accelerating_voltage": "300 kV", "extra": {"note": "` + strings.Repeat("x", 1001) + `"}}`, "extra.note"},
		{`{"accelerating_voltage": "300 kV", "extra": "free text"}`, "extra"},
		{`{"accelerating_voltage": "300 kV", "extra": {"a": "1", "a": "2"}}`, "extra"},
		{`{"accelerating_voltage": "300 kV", "extra": {"` + strings.Repeat("k", 65) + `": "v"}}`, "extra"},
		{`{"accelerating_voltage": "300 kV", "extra": {` + manyExtra(33) + `}}`, "extra"},
		{`{"accelerating_voltage": "300 kV", "accelerating_voltage": "200 kV"}`, "conditions"}, // duplicate key
		{`{"accelerating_voltage": "300 kV"} {}`, "conditions"},
		{`[1, 2]`, "conditions"},
		{`{"accelerating_voltage": "300 kV"`, "conditions"},
	}
	for _, c := range cases {
		_, err := ParseConditions([]byte(c.json))
		var be *beamledger.Error
		if !errors.As(err, &be) || !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("%s: err = %v, want an ErrInvalid *beamledger.Error", c.json, err)
			continue
		}
		if be.Fields[c.field] == "" {
			t.Errorf("%s: fields %v do not name %s", c.json, be.Fields, c.field)
		}
	}
}

// Every problem is reported at once, so a client fixes its input in one round.
func TestParseConditionsReportsAll(t *testing.T) {
	_, err := ParseConditions([]byte(`{"accelerating_voltage": "300 mA", "beam_current": "-1 pA", "dwell": 3, "extra": {"a": 1}}`))
	var be *beamledger.Error
	if !errors.As(err, &be) {
		t.Fatalf("err = %v", err)
	}
	for _, f := range []string{"accelerating_voltage", "beam_current", "dwell", "extra.a"} {
		if be.Fields[f] == "" {
			t.Errorf("field %s not reported: %v", f, be.Fields)
		}
	}
}

func TestParseConditionsTooLarge(t *testing.T) {
	raw := `{"accelerating_voltage": "300 kV", "extra": {"x": "` + strings.Repeat("y", MaxConditionsBytes) + `"}}`
	var be *beamledger.Error
	if _, err := ParseConditions([]byte(raw)); !errors.As(err, &be) || be.Fields["conditions"] == "" {
		t.Errorf("oversized input: %v", err)
	}
}

// The stored form reads back to an equal value, since it lives in a jsonb column.
func TestConditionsJSONRoundTrip(t *testing.T) {
	for _, in := range []string{withoutNote(), `{"accelerating_voltage": "200 kV"}`, `{"accelerating_voltage": 3e5, "detectors": [], "aberrations": {}, "extra": {}}`} {
		c, err := ParseConditions([]byte(in))
		if err != nil {
			t.Fatal(err)
		}
		stored, err := json.Marshal(c)
		if err != nil {
			t.Fatal(err)
		}
		var back Conditions
		if err := json.Unmarshal(stored, &back); err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(back, c) {
			t.Errorf("round trip changed the value:\n stored %s\n got  %+v\n want %+v", stored, back, c)
		}
	}
	c, _ := ParseConditions([]byte(`{"accelerating_voltage": "300 kV"}`))
	if b, _ := json.Marshal(c); string(b) != `{"accelerating_voltage":{"si":300000,"unit":"V","text":"300 kV"}}` {
		t.Errorf("stored form = %s", b)
	}
}

func TestConditionsDerive(t *testing.T) {
	c, err := ParseConditions([]byte(`{
		"accelerating_voltage": "300 kV", "beam_current": "50 pA", "convergence_semiangle": "25 mrad",
		"dwell_time": "2 µs", "pixel_size": "0.1 Å", "camera_length": "80 mm",
		"detectors": [{"name": "HAADF", "inner_radius": "2 mm", "outer_radius": "10 mm"}, {"name": "ADF2"}],
		"aberrations": {"C3": "1 mm"}, "defocus": "-50 nm"}`))
	if err != nil {
		t.Fatal(err)
	}
	d := c.Derive(optics.DefaultSettings())
	if d.FluenceEPerAngstrom2 == nil || math.Abs(*d.FluenceEPerAngstrom2-62415.09) > 0.005 { // [computed] 50 pA, 2 µs, 0.1 Å, 1 frame → 62 415.09 e⁻/Å²
		t.Errorf("fluence = %v", d.FluenceEPerAngstrom2)
	}
	if len(d.Detectors) != 1 || math.Abs(d.Detectors[0].InnerMrad-25.000) > 0.5e-3 || math.Abs(d.Detectors[0].OuterMrad-125.00) > 0.5e-2 { // [computed] r = 2 mm, 10 mm at L = 80 mm → 25.000, 125.00 mrad
		t.Errorf("detectors = %+v", d.Detectors)
	}
	found := false
	for _, w := range d.Warnings {
		found = found || strings.Contains(w, "ADF2 has no radii or angles")
	}
	if !found {
		t.Errorf("no warning for the detector without geometry: %q", d.Warnings)
	}
}
