package quantity

import (
	"errors"
	"math"
	"strings"
	"testing"
)

// The expected values are exact decimal conversions by the SI prefix definitions
// [published: BIPM, The International System of Units, 9th ed. (2019), Table 7], the
// ångström as 10⁻¹⁰ m and 0 °C as 273.15 K [published: same brochure, Tables 4 and 8].
func TestParse(t *testing.T) {
	cases := []struct {
		text string
		si   float64
		dim  Dimension
	}{
		{"300 kV", 300e3, Voltage},
		{"300kV", 300e3, Voltage},
		{"  200\u00a0kV ", 200e3, Voltage}, // no-break space, as SI style writes it
		{"1.2 MV", 1.2e6, Voltage},
		{"50 pA", 50e-12, Current},
		{"1 nA", 1e-9, Current},
		{"25 mrad", 25e-3, Angle},
		{"1.5e-3 rad", 1.5e-3, Angle},
		{"1.5E-3 rad", 1.5e-3, Angle},
		{"2 µs", 2e-6, Time},           // U+00B5 micro sign
		{"2 \u03bcs", 2e-6, Time},      // U+03BC Greek mu
		{"2 us", 2e-6, Time},           // ASCII stand-in
		{"0.1 \u00c5", 1e-11, Length},  // U+00C5
		{"0.1 \u212b", 1e-11, Length},  // U+212B ANGSTROM SIGN
		{"0.1 A\u030a", 1e-11, Length}, // A + combining ring
		{"10 pm", 10e-12, Length},
		{"80 mm", 80e-3, Length},
		{"-57.8 nm", -57.8e-9, Length},
		{"\u221257.8 nm", -57.8e-9, Length}, // typeset minus sign
		{"+3 m", 3, Length},
		{"1.2 µm", 1.2e-6, Length},
		{"2 cm", 2e-2, Length},
		{".5 mm", 0.5e-3, Length},
		{"5. mm", 5e-3, Length},
		{"293 K", 293, Temperature},
		{"25 °C", 298.15, Temperature},
		{"25 \u2103", 298.15, Temperature},
		{"-273.15 °C", 0, Temperature},
		{"1 ms", 1e-3, Time},
		{"1 m", 1, Length}, // whole symbol before prefix: metre, not "milli"
		{"1e3 mV", 1, Voltage},
		{"1e-400 V", 0, Voltage}, // underflows to zero; range checks belong to the caller
	}
	for _, c := range cases {
		q, err := Parse(c.text)
		if err != nil {
			t.Errorf("Parse(%q): %v", c.text, err)
			continue
		}
		if q.SI != c.si || q.Dim != c.dim {
			t.Errorf("Parse(%q) = %v %v, want %v %v", c.text, q.SI, q.Dim, c.si, c.dim)
		}
	}
}

// Degrees convert with π/180 and are not exact, so they are checked to a tolerance
// [published: BIPM SI Brochure, 9th ed., Table 8: 1° = (π/180) rad].
func TestParseDegrees(t *testing.T) {
	for _, text := range []string{"90°", "90 °", "90 deg"} {
		q, err := Parse(text)
		if err != nil || q.Dim != Angle || math.Abs(q.SI-math.Pi/2) > 1e-15 {
			t.Errorf("Parse(%q) = %v, %v; want π/2 rad", text, q, err)
		}
	}
}

func TestParseRejects(t *testing.T) {
	cases := []struct {
		text string
		err  error
	}{
		{"", ErrSyntax},
		{"kV", ErrSyntax},
		{"300", ErrSyntax}, // a bare number has no unit to trust
		{"300 ", ErrSyntax},
		{"NaN V", ErrSyntax},
		{"Inf V", ErrSyntax},
		{"inf V", ErrSyntax},
		{"0x1p3 V", ErrUnit}, // hexadecimal: "0" then the unit "x1p3 V"
		{"1_000 V", ErrUnit},
		{"300 kv", ErrUnit}, // case matters: kv is nothing, MV and mV differ by 10⁹
		{"300 KV", ErrUnit},
		{"300 volts", ErrUnit},
		{"1.2.3 V", ErrUnit},
		{"3 e V", ErrUnit},
		{"5 mÅ", ErrUnit}, // no prefixes on the ångström
		{"5 k°C", ErrUnit},
		{"5 °F", ErrUnit},
		{"1 hV", ErrUnit},
		{"1e999 V", ErrRange},
		{"1e308 kV", ErrRange},
		{"1e99999999999999999999 V", ErrRange},
		{"1 V\xff", ErrSyntax},
		{"1 V" + string(make([]byte, 80)), ErrSyntax},
	}
	for _, c := range cases {
		q, err := Parse(c.text)
		if !errors.Is(err, c.err) {
			t.Errorf("Parse(%q) = %v, %v; want %v", c.text, q, err, c.err)
		}
	}
}

func TestParseAs(t *testing.T) {
	if v, err := ParseAs("300 kV", Voltage); err != nil || v != 300e3 {
		t.Errorf("ParseAs(300 kV, Voltage) = %v, %v", v, err)
	}
	for _, c := range []struct {
		text string
		want Dimension
	}{
		{"300 mA", Voltage},
		{"0.1 A", Length}, // the ampere, not the ångström
		{"25 mm", Angle},
		{"2 K", Time},
	} {
		if _, err := ParseAs(c.text, c.want); !errors.Is(err, ErrDimension) {
			t.Errorf("ParseAs(%q, %v) = %v, want ErrDimension", c.text, c.want, err)
		}
	}
	if _, err := ParseAs("0.1 A", Length); err == nil || !contains(err.Error(), "Å") {
		t.Errorf("ParseAs(0.1 A, Length) should hint at Å: %v", err)
	}
}

func TestDimensionWords(t *testing.T) {
	for _, c := range []struct {
		d                   Dimension
		name, unit, example string
	}{
		{Voltage, "voltage", "V", `"300 kV"`},
		{Length, "length", "m", `"0.1 Å" or "80 mm"`},
		{Temperature, "temperature", "K", `"293 K" or "-180 °C"`},
		{Dimension(99), "Dimension(99)", "", ""},
	} {
		if c.d.String() != c.name || c.d.Unit() != c.unit || c.d.Example() != c.example {
			t.Errorf("%d: %q %q %q", c.d, c.d.String(), c.d.Unit(), c.d.Example())
		}
	}
	// Every example parses to its own dimension, so messages never suggest a bad value.
	for d := Voltage; d <= Temperature; d++ {
		first := strings.Split(strings.Trim(d.Example(), `"`), `"`)[0]
		if q, err := Parse(first); err != nil || q.Dim != d {
			t.Errorf("example %q of %v: %v, %v", first, d, q, err)
		}
	}
}

func contains(s, sub string) bool {
	for i := 0; i+len(sub) <= len(s); i++ {
		if s[i:i+len(sub)] == sub {
			return true
		}
	}
	return false
}

// Format then Parse must give back the same bits: the stored SI value is what the
// derivations used, and reading it back must not drift.
func TestFormatRoundTrip(t *testing.T) {
	values := []float64{300e3, 1.968749e-12, 2e-6, 0.1e-10, 62415.09, 1e-300, 5e-324, 1.7976931348623157e308, 0, -57.827e-9, 0.1 + 0.2}
	for _, d := range []Dimension{Voltage, Current, Angle, Time, Length, Temperature} {
		for _, v := range values {
			text := Format(v, d)
			q, err := Parse(text)
			if err != nil || q.SI != v || q.Dim != d {
				t.Errorf("Parse(Format(%v, %v) = %q) = %v, %v", v, d, text, q, err)
			}
		}
	}
}

func TestFormatIn(t *testing.T) {
	cases := []struct {
		si   float64
		unit string
		want string
	}{
		{300e3, "kV", "300 kV"},
		{25e-3, "mrad", "25 mrad"},
		{2e-6, "µs", "2 µs"},
		{1e-11, "Å", "0.1 Å"},
		{80e-3, "mm", "80 mm"},
		{1.5e-3, "rad", "0.0015 rad"},
		{-57.827e-9, "nm", "-57.827 nm"},
		{1e-30, "pm", "1e-18 pm"},
		{12345678.9, "mV", "12345678900 mV"},
		{1e25, "V", "1e25 V"},
		{0, "kV", "0 kV"},
	}
	for _, c := range cases {
		got, err := FormatIn(c.si, c.unit)
		if err != nil || got != c.want {
			t.Errorf("FormatIn(%v, %q) = %q, %v; want %q", c.si, c.unit, got, err, c.want)
		}
		// Powers of ten move the decimal point, so the round trip is exact.
		if q, err := Parse(got); err != nil || q.SI != c.si {
			t.Errorf("Parse(%q) = %v, %v; want %v exactly", got, q.SI, err, c.si)
		}
	}
	for _, c := range []struct {
		si   float64
		unit string
	}{{math.Pi / 2, "°"}, {0.0123, "deg"}, {298.15, "°C"}, {77, "°C"}} {
		got, err := FormatIn(c.si, c.unit)
		if err != nil {
			t.Fatal(err)
		}
		q, err := Parse(got)
		if err != nil || math.Abs(q.SI-c.si) > 4*ulp(c.si) {
			t.Errorf("Parse(FormatIn(%v, %q) = %q) = %v, %v", c.si, c.unit, got, q.SI, err)
		}
	}
	if _, err := FormatIn(1, "furlong"); !errors.Is(err, ErrUnit) {
		t.Errorf("FormatIn with an unknown unit: %v", err)
	}
	if _, err := FormatIn(math.NaN(), "V"); !errors.Is(err, ErrRange) {
		t.Errorf("FormatIn(NaN): %v", err)
	}
}

func ulp(x float64) float64 { return math.Nextafter(math.Abs(x), math.Inf(1)) - math.Abs(x) }
