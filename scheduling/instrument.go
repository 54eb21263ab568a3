package scheduling

import (
	"context"
	"math"
	"regexp"
	"slices"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
)

// InstrumentKind says what sort of tool an instrument is.
type InstrumentKind string

// Instrument kinds.
const (
	KindSTEM  InstrumentKind = "stem"    // scanning transmission (often also conventional TEM)
	KindTEM   InstrumentKind = "tem"     // conventional transmission
	KindSEM   InstrumentKind = "sem"     // scanning electron microscope
	KindFIB   InstrumentKind = "fib_sem" // focused ion beam with an electron column
	KindOther InstrumentKind = "other"   // plasma cleaners, coaters, anything bookable
)

// InstrumentKinds lists every kind.
var InstrumentKinds = []InstrumentKind{KindSTEM, KindTEM, KindSEM, KindFIB, KindOther}

// Corrector says which aberration corrector an instrument carries.
type Corrector string

// Corrector configurations.
const (
	CorrectorNone          Corrector = "none"
	CorrectorProbe         Corrector = "probe"
	CorrectorImage         Corrector = "image"
	CorrectorProbeAndImage Corrector = "probe_and_image"
)

// DetectorKind is the physical kind of a detector.
type DetectorKind string

// Detector kinds.
const (
	DetectorAnnular      DetectorKind = "annular"      // ring detector for BF/ABF/ADF signals
	DetectorPixelated    DetectorKind = "pixelated"    // fast camera recording a pattern per probe position
	DetectorCamera       DetectorKind = "camera"       // imaging camera for TEM
	DetectorSpectrometer DetectorKind = "spectrometer" // EELS or EDX
	DetectorSecondary    DetectorKind = "secondary"    // secondary-electron detector
	DetectorBackscatter  DetectorKind = "backscatter"  // backscattered-electron detector
)

// DetectorKinds lists every detector kind.
var DetectorKinds = []DetectorKind{DetectorAnnular, DetectorPixelated, DetectorCamera, DetectorSpectrometer, DetectorSecondary, DetectorBackscatter}

// Detector is one detector of an instrument with its physical geometry in metres.
// Angles follow from radii only with a calibrated camera length.
type Detector struct {
	Name         string       `json:"name"`
	Kind         DetectorKind `json:"kind"`
	InnerRadiusM *float64     `json:"inner_radius_m,omitempty"`
	OuterRadiusM *float64     `json:"outer_radius_m,omitempty"`
}

// problem words what is wrong with a detector, or returns "".
func (d Detector) problem(seen map[string]bool) string {
	finite := func(p *float64) bool { return p == nil || (!math.IsNaN(*p) && !math.IsInf(*p, 0)) }
	switch {
	case strings.TrimSpace(d.Name) == "" || utf8.RuneCountInString(d.Name) > 100 || seen[d.Name]:
		return "each detector needs a unique name of at most 100 characters"
	case !slices.Contains(DetectorKinds, d.Kind):
		return "detector " + d.Name + ": kind must be one of annular, pixelated, camera, spectrometer, secondary, backscatter"
	case !finite(d.InnerRadiusM) || !finite(d.OuterRadiusM):
		return "detector " + d.Name + ": radii must be finite numbers"
	case d.InnerRadiusM != nil && *d.InnerRadiusM < 0:
		return "detector " + d.Name + ": inner radius must be ≥ 0"
	case d.OuterRadiusM != nil && *d.OuterRadiusM <= 0:
		return "detector " + d.Name + ": outer radius must be > 0"
	case d.InnerRadiusM != nil && d.OuterRadiusM != nil && *d.InnerRadiusM >= *d.OuterRadiusM:
		return "detector " + d.Name + ": inner radius must be below the outer radius"
	}
	return ""
}

// ConditionChecks is how strictly acquisitions are held to an instrument's capabilities.
type ConditionChecks string

// Condition check modes.
const (
	ConditionChecksError   ConditionChecks = "error"
	ConditionChecksWarning ConditionChecks = "warning"
)

// ConditionLimits are what acquisitions on an instrument are held to beyond its
// voltages and detectors, and how strictly; staff set them.
type ConditionLimits struct {
	CameraLengthMinM *float64        `json:"camera_length_min_m"`
	CameraLengthMaxM *float64        `json:"camera_length_max_m"`
	ConditionChecks  ConditionChecks `json:"condition_checks"`
}

// Normalize fills the default mode and checks the limits.
func (l *ConditionLimits) Normalize() error {
	fe := beamledger.FieldErrors{}
	l.check(fe)
	return fe.Err()
}

func (l *ConditionLimits) check(fe beamledger.FieldErrors) {
	if l.ConditionChecks == "" {
		l.ConditionChecks = ConditionChecksError
	}
	if l.ConditionChecks != ConditionChecksError && l.ConditionChecks != ConditionChecksWarning {
		fe.Add("condition_checks", "must be error or warning")
	}
	// Camera lengths from 1 mm to 100 m cover every projection system built.
	for field, p := range map[string]*float64{"camera_length_min_m": l.CameraLengthMinM, "camera_length_max_m": l.CameraLengthMaxM} {
		if p != nil && (math.IsNaN(*p) || *p < 1e-3 || *p > 100) {
			fe.Add(field, "must be between 0.001 and 100 m")
		}
	}
	if l.CameraLengthMinM != nil && l.CameraLengthMaxM != nil && *l.CameraLengthMinM > *l.CameraLengthMaxM {
		fe.Add("camera_length_max_m", "must not be below camera_length_min_m")
	}
}

// Instrument is a bookable microscope or other tool with its capabilities.
type Instrument struct {
	ID                    string         `json:"id"`
	Code                  string         `json:"code"`
	Name                  string         `json:"name"`
	Kind                  InstrumentKind `json:"kind"`
	Location              string         `json:"location"`
	Bookable              bool           `json:"bookable"`
	AcceleratingVoltagesV []float64      `json:"accelerating_voltages_v"`
	Corrector             Corrector      `json:"corrector"`
	Detectors             []Detector     `json:"detectors"`
	// CameraLengthMinM and CameraLengthMaxM bound the camera lengths acquisitions may
	// report; absent bounds are not checked.
	CameraLengthMinM *float64 `json:"camera_length_min_m,omitempty"`
	CameraLengthMaxM *float64 `json:"camera_length_max_m,omitempty"`
	// ConditionChecks says what happens to an acquisition whose conditions the
	// instrument does not offer: refused ("error", the default) or accepted with a
	// warning ("warning").
	ConditionChecks ConditionChecks `json:"condition_checks"`
	CreatedAt       time.Time       `json:"created_at"`
	UpdatedAt       time.Time       `json:"updated_at"`
}

var instrumentCode = regexp.MustCompile(`^[A-Z0-9][A-Z0-9-]{1,31}$`)

// Capabilities are what an instrument can do, as a manager edits them after it was
// made: its name, kind, location, accelerating voltages, corrector and detectors. Its
// code, whether it is bookable and its condition limits are set apart.
type Capabilities struct {
	Name                  string         `json:"name"`
	Kind                  InstrumentKind `json:"kind"`
	Location              string         `json:"location"`
	AcceleratingVoltagesV []float64      `json:"accelerating_voltages_v"`
	Corrector             Corrector      `json:"corrector"`
	Detectors             []Detector     `json:"detectors"`
}

// WithCapabilities is the instrument with c in place of its capabilities, checked and
// normalized as Normalize does for a new one.
func (in Instrument) WithCapabilities(c Capabilities) (Instrument, error) {
	in.Name, in.Kind, in.Location, in.Corrector = c.Name, c.Kind, c.Location, c.Corrector
	in.AcceleratingVoltagesV, in.Detectors = slices.Clone(c.AcceleratingVoltagesV), slices.Clone(c.Detectors)
	if in.AcceleratingVoltagesV == nil {
		in.AcceleratingVoltagesV = []float64{}
	}
	if in.Detectors == nil {
		in.Detectors = []Detector{}
	}
	return in, in.Normalize()
}

// Normalize canonicalises and checks an instrument before it is created; ID and
// timestamps are ignored.
func (in *Instrument) Normalize() error {
	fe := beamledger.FieldErrors{}
	in.Code = strings.ToUpper(strings.TrimSpace(in.Code))
	if !instrumentCode.MatchString(in.Code) {
		fe.Add("code", "must be 2-32 characters of A-Z, 0-9 and '-'")
	}
	in.Name = strings.TrimSpace(in.Name)
	if in.Name == "" || utf8.RuneCountInString(in.Name) > 200 {
		fe.Add("name", "is required (at most 200 characters)")
	}
	if !slices.Contains(InstrumentKinds, in.Kind) {
		fe.Add("kind", "must be one of stem, tem, sem, fib_sem, other")
	}
	if in.Corrector == "" {
		in.Corrector = CorrectorNone
	}
	if !slices.Contains([]Corrector{CorrectorNone, CorrectorProbe, CorrectorImage, CorrectorProbeAndImage}, in.Corrector) {
		fe.Add("corrector", "must be one of none, probe, image, probe_and_image")
	}
	for _, v := range in.AcceleratingVoltagesV {
		// 1 kV to 3 MV covers every electron microscope built; outside is a unit slip.
		if math.IsNaN(v) || v < 1e3 || v > 3e6 {
			fe.Add("accelerating_voltages_v", "each voltage must be between 1000 and 3000000 V")
		}
	}
	slices.Sort(in.AcceleratingVoltagesV)
	in.AcceleratingVoltagesV = slices.Compact(in.AcceleratingVoltagesV)
	if utf8.RuneCountInString(in.Location) > 200 {
		fe.Add("location", "is too long (at most 200 characters)")
	}
	limits := ConditionLimits{CameraLengthMinM: in.CameraLengthMinM, CameraLengthMaxM: in.CameraLengthMaxM, ConditionChecks: in.ConditionChecks}
	limits.check(fe)
	in.ConditionChecks = limits.ConditionChecks
	seen := map[string]bool{}
	for _, d := range in.Detectors {
		if reason := d.problem(seen); reason != "" {
			fe.Add("detectors", reason)
		}
		seen[d.Name] = true
	}
	return fe.Err()
}

// InstrumentStore persists instruments.
type InstrumentStore interface {
	// CreateInstrument stores an instrument with its detectors, and its creation in
	// the ledger under actor at now. ErrConflict when the code is taken.
	CreateInstrument(ctx context.Context, in Instrument, actor string, now time.Time) (Instrument, error)
	// Instrument returns one instrument. ErrNotFound when there is none.
	Instrument(ctx context.Context, id string) (Instrument, error)
	// SetConditionLimits replaces an instrument's condition limits and returns the
	// instrument. ErrNotFound when there is none. Like the two below, it records the
	// change in the ledger under actor at now.
	SetConditionLimits(ctx context.Context, id string, l ConditionLimits, actor string, now time.Time) (Instrument, error)
	// SetInstrumentBookable opens an instrument to bookings or closes it, and returns
	// the instrument. Bookings already made stay. ErrNotFound when there is none.
	SetInstrumentBookable(ctx context.Context, id string, bookable bool, actor string, now time.Time) (Instrument, error)
	// SetInstrumentCapabilities stores in's capabilities (see Capabilities) over those
	// of the instrument with in's id, detectors replaced as a whole, and returns it.
	// ErrNotFound when there is none.
	SetInstrumentCapabilities(ctx context.Context, in Instrument, actor string, now time.Time) (Instrument, error)
	// InstrumentByCode returns one instrument by its code. ErrNotFound when none.
	InstrumentByCode(ctx context.Context, code string) (Instrument, error)
	// Instruments lists instruments ordered by code.
	Instruments(ctx context.Context) ([]Instrument, error)
}
