package provenance

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"math"
	"slices"
	"strconv"
	"strings"
	"unicode/utf8"

	"beamledger"
	"beamledger/provenance/quantity"
)

// MaxConditionsBytes bounds the JSON ParseConditions reads: a full set of conditions
// with every coefficient and extra field is a few kilobytes.
const MaxConditionsBytes = 64 << 10

// condRange is the accepted interval of one condition, in SI, and how the refusal is
// worded. Each bound in condScalars says why it is there: bounds catch unit slips
// (V for kV, m for mm) rather than enforce physics to the last digit.
type condRange struct {
	lo, hi         float64
	loOpen, hiOpen bool // the bound itself is excluded
	words          string
}

func (r condRange) holds(v float64) bool {
	return !(v < r.lo || v > r.hi || (r.loOpen && v == r.lo) || (r.hiOpen && v == r.hi))
}

// condScalar is one plain quantity key of the conditions object.
type condScalar struct {
	key string
	dim quantity.Dimension
	rng condRange
	set func(*Conditions, *Quantity)
}

var condScalars = []condScalar{
	// The fixed contract: below 1 kV is no transmission or scanning instrument's
	// operating voltage, and 3 MV is the largest high-voltage microscope built.
	{"accelerating_voltage", quantity.Voltage, condRange{1e3, 3e6, false, false, "must be between 1 kV and 3 MV"},
		func(c *Conditions, q *Quantity) { c.AcceleratingVoltage = *q }},
	// Probe currents run from fA to µA and a gun's total emission is about 100 µA, so
	// more than 1 mA is a unit slip.
	{"beam_current", quantity.Current, condRange{0, 1e-3, true, false, "must be more than 0 and at most 1 mA"},
		func(c *Conditions, q *Quantity) { c.BeamCurrent = q }},
	// A semi-angle, not the full cone: the formulas are small-angle ones, and 1 rad
	// (57°) is beyond any condenser; a full angle or degrees typed as rad lands here.
	{"convergence_semiangle", quantity.Angle, condRange{0, 1, true, true, "must be more than 0 and less than 1 rad (a semi-angle, e.g. \"25 mrad\")"},
		func(c *Conditions, q *Quantity) { c.ConvergenceSemiangle = q }},
	// Spectrum-imaging dwells reach seconds; an hour per pixel is a frame time or a slip.
	{"dwell_time", quantity.Time, condRange{0, 3600, true, false, "must be more than 0 and at most 1 h per pixel"},
		func(c *Conditions, q *Quantity) { c.DwellTime = q }},
	// Specimen-plane pixels run from pm to µm; a millimetre pixel would cover a third
	// of a 3 mm specimen disc.
	{"pixel_size", quantity.Length, condRange{0, 1e-3, true, false, "must be more than 0 and at most 1 mm"},
		func(c *Conditions, q *Quantity) { c.PixelSize = q }},
	// A frame or exposure longer than a day outlasts any booking.
	{"frame_time", quantity.Time, condRange{0, 86400, true, false, "must be more than 0 and at most 24 h"},
		func(c *Conditions, q *Quantity) { c.FrameTime = q }},
	{"exposure_time", quantity.Time, condRange{0, 86400, true, false, "must be more than 0 and at most 24 h"},
		func(c *Conditions, q *Quantity) { c.ExposureTime = q }},
	// Camera lengths run from millimetres to the hundreds of metres of low-angle
	// diffraction; a kilometre is a slip.
	{"camera_length", quantity.Length, condRange{0, 1000, true, false, "must be more than 0 and at most 1 km"},
		func(c *Conditions, q *Quantity) { c.CameraLength = q }},
	// The beam cannot usefully be wider than the 3 mm specimen disc it lands on.
	{"illuminated_diameter", quantity.Length, condRange{0, 10e-3, true, false, "must be more than 0 and at most 10 mm"},
		func(c *Conditions, q *Quantity) { c.IlluminatedDiameter = q }},
	// Lorentz-mode defocus reaches millimetres either way; centimetres is a slip.
	{"defocus", quantity.Length, condRange{-10e-3, 10e-3, false, false, "must be within ±10 mm (underfocus negative)"},
		func(c *Conditions, q *Quantity) { c.Defocus = q }},
	// Above absolute zero; heating holders stop near 1300 °C and tungsten melts at
	// 3695 K, so 3000 K is past any specimen.
	{"specimen_temperature", quantity.Temperature, condRange{0, 3000, true, false, "must be above 0 K and at most 3000 K"},
		func(c *Conditions, q *Quantity) { c.SpecimenTemperature = q }},
}

// Bounds of the structured keys, each at a size no honest record approaches, so that
// stored rows and error messages stay small.
const (
	maxFrameCount  = 10_000_000 // 100 s of a 100 kHz camera
	maxDetectors   = 16
	maxNameRunes   = 64
	maxExtraKeys   = 32
	maxExtraRunes  = 1000
	maxDetectorRad = math.Pi / 2 // transmission detectors collect forward scattering only
	maxDetectorM   = 1.0         // no detector in a column is a metre across
	maxAberrationM = 1.0         // uncorrected Cs is ~1 mm and C5 a few cm; a metre is a slip
)

// ParseConditions reads a conditions object as clients send it: "number unit" strings
// or plain numbers in the SI unit, checked against the bounds above. Every problem is
// reported at once, by JSON-path-like field name (beam_current, detectors[1].name,
// aberrations.C3), in a *beamledger.Error of kind ErrInvalid.
func ParseConditions(raw []byte) (Conditions, error) {
	var c Conditions
	if len(raw) > MaxConditionsBytes {
		return c, beamledger.InvalidField("conditions", fmt.Sprintf("is larger than %d bytes", MaxConditionsBytes))
	}
	members, err := condObject(raw)
	if err != nil {
		return c, beamledger.InvalidField("conditions", err.Error())
	}
	fe := beamledger.FieldErrors{}
	for _, s := range condScalars {
		if v := members[s.key]; v != nil {
			if q := condQuantity(fe, s.key, v, s.dim, s.rng); q != nil {
				s.set(&c, q)
			}
		} else if s.key == "accelerating_voltage" {
			fe.Add(s.key, "is required, e.g. \"300 kV\"")
		}
	}
	if v := members["frame_count"]; v != nil {
		c.FrameCount = condFrameCount(fe, v)
	}
	if v := members["detectors"]; v != nil {
		haveL := members["camera_length"] != nil // a bad camera_length is reported once, under its own name
		c.Detectors = condDetectors(fe, v, haveL, c.CameraLength)
	}
	if v := members["aberrations"]; v != nil {
		c.Aberrations = condAberrations(fe, v)
	}
	if v := members["extra"]; v != nil {
		c.Extra = condExtra(fe, v)
	}
	for _, k := range condSortedKeys(members) {
		if !condKnownKey(k) {
			fe.Add(k, "is not a condition this server knows")
		}
	}
	if err := fe.Err(); err != nil {
		return Conditions{}, err
	}
	return c, nil
}

func condKnownKey(k string) bool {
	switch k {
	case "frame_count", "detectors", "aberrations", "extra":
		return true
	}
	return slices.ContainsFunc(condScalars, func(s condScalar) bool { return s.key == k })
}

// condObject reads one JSON object into its members, refusing duplicate keys (which
// encoding/json would silently resolve to the last) and anything after the object.
// A member whose value is null is kept with a nil value: callers treat it as absent
// (producers write null for "not measured"), but an unknown key is still refused.
func condObject(raw []byte) (map[string]json.RawMessage, error) {
	dec := json.NewDecoder(bytes.NewReader(raw))
	dec.UseNumber()
	if t, err := dec.Token(); err != nil || t != json.Delim('{') {
		return nil, errors.New("must be a JSON object")
	}
	out := map[string]json.RawMessage{}
	for dec.More() {
		t, err := dec.Token()
		if err != nil {
			return nil, errors.New("is not valid JSON")
		}
		key, _ := t.(string)
		var v json.RawMessage
		if err := dec.Decode(&v); err != nil {
			return nil, errors.New("is not valid JSON")
		}
		if _, dup := out[key]; dup {
			return nil, fmt.Errorf("names %q twice", key)
		}
		if string(v) == "null" {
			v = nil
		}
		out[key] = v
	}
	if _, err := dec.Token(); err != nil {
		return nil, errors.New("is not valid JSON")
	}
	if _, err := dec.Token(); err != io.EOF {
		return nil, errors.New("must be one JSON object with nothing after it")
	}
	return out, nil
}

// condQuantity reads a "number unit" string or a plain number in the SI unit of dim,
// and checks it against rng. It records a problem in fe and returns nil on failure.
func condQuantity(fe beamledger.FieldErrors, field string, raw json.RawMessage, dim quantity.Dimension, rng condRange) *Quantity {
	raw = bytes.TrimSpace(raw)
	var q Quantity
	switch {
	case len(raw) > 0 && raw[0] == '"':
		var s string
		if err := json.Unmarshal(raw, &s); err != nil {
			fe.Add(field, "is not a valid JSON string")
			return nil
		}
		si, err := quantity.ParseAs(s, dim)
		if err != nil {
			fe.Add(field, err.Error())
			return nil
		}
		q = Quantity{SI: si, Unit: dim.Unit(), Text: s}
	case len(raw) > 0 && (raw[0] == '-' || ('0' <= raw[0] && raw[0] <= '9')):
		si, err := strconv.ParseFloat(string(raw), 64)
		if err != nil || math.IsInf(si, 0) {
			fe.Add(field, "is not a finite number")
			return nil
		}
		q = Quantity{SI: si, Unit: dim.Unit(), Text: string(raw)}
	default:
		fe.Add(field, fmt.Sprintf("must be a %s such as %s, or a plain number in %s", dim, dim.Example(), dim.Unit()))
		return nil
	}
	if !rng.holds(q.SI) {
		fe.Add(field, fmt.Sprintf("%s (got %s)", rng.words, q.Text))
		return nil
	}
	return &q
}

func condFrameCount(fe beamledger.FieldErrors, raw json.RawMessage) *int {
	n, err := strconv.ParseInt(string(bytes.TrimSpace(raw)), 10, 64)
	if err != nil {
		fe.Add("frame_count", "must be a plain whole number, e.g. 10")
		return nil
	}
	if n < 1 || n > maxFrameCount {
		fe.Add("frame_count", fmt.Sprintf("must be between 1 and %d", maxFrameCount))
		return nil
	}
	v := int(n)
	return &v
}

// condExtra reads free string key/values, bounded so that a client cannot turn
// conditions into a document store.
func condExtra(fe beamledger.FieldErrors, raw json.RawMessage) map[string]string {
	m, err := condObject(raw)
	if err != nil {
		fe.Add("extra", "must be an object of string values; "+err.Error())
		return nil
	}
	if len(m) > maxExtraKeys {
		fe.Add("extra", fmt.Sprintf("may hold at most %d keys", maxExtraKeys))
		return nil
	}
	out := map[string]string{}
	for _, k := range condSortedKeys(m) {
		field := "extra." + k
		var s string
		switch {
		case k == "" || utf8.RuneCountInString(k) > maxNameRunes || !utf8.ValidString(k):
			fe.Add("extra", fmt.Sprintf("keys must be 1 to %d characters", maxNameRunes))
		case json.Unmarshal(m[k], &s) != nil:
			fe.Add(field, "must be a string")
		case utf8.RuneCountInString(s) > maxExtraRunes:
			fe.Add(field, fmt.Sprintf("must be at most %d characters", maxExtraRunes))
		default:
			out[k] = s
		}
	}
	if len(out) == 0 {
		return nil // stored form omits it; nil keeps the round trip equal
	}
	return out
}

func condSortedKeys[V any](m map[string]V) []string {
	return slices.Sorted(maps.Keys(m))
}

// condName checks a detector name: present, short, printable.
func condName(s string) string {
	switch {
	case strings.TrimSpace(s) == "":
		return "is required"
	case s != strings.TrimSpace(s):
		return "must not start or end with spaces"
	case utf8.RuneCountInString(s) > maxNameRunes:
		return fmt.Sprintf("must be at most %d characters", maxNameRunes)
	}
	return ""
}

// condMembersOnly reports unknown keys of a nested object under prefix.
func condMembersOnly(fe beamledger.FieldErrors, prefix string, m map[string]json.RawMessage, allowed ...string) {
	for _, k := range condSortedKeys(m) {
		if !slices.Contains(allowed, k) {
			fe.Add(prefix+"."+k, "is not a key here (expected "+strings.Join(allowed, ", ")+")")
		}
	}
}
