package provenance

import (
	"math"
	"slices"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
)

// CalibrationKind says what a calibration measured.
type CalibrationKind string

// Calibration kinds.
const (
	// CalibrationCameraLength maps a nominal camera length (what the console shows) to
	// the measured one, from a diffraction pattern of a known spacing (R = λL/d).
	CalibrationCameraLength CalibrationKind = "camera_length"
	// CalibrationPixelSize gives the specimen-plane pixel size at one magnification.
	CalibrationPixelSize CalibrationKind = "pixel_size"
	// CalibrationDetectorAngles gives a detector's measured inner and outer collection
	// semi-angles, which replace θ = r/L for that detector while in force.
	CalibrationDetectorAngles CalibrationKind = "detector_angles"
)

// CalibrationKinds lists every kind.
var CalibrationKinds = []CalibrationKind{CalibrationCameraLength, CalibrationPixelSize, CalibrationDetectorAngles}

// Calibration is an effective-from measurement for an instrument. It is never changed:
// a wrong one is corrected by a new calibration naming it, and the corrected one is
// then never in force.
type Calibration struct {
	ID            string          `json:"id"`
	InstrumentID  string          `json:"instrument_id"`
	Kind          CalibrationKind `json:"kind"`
	Subject       string          `json:"subject"`
	EffectiveFrom time.Time       `json:"effective_from"`

	NominalCameraLengthM *float64 `json:"nominal_camera_length_m,omitempty"`
	CameraLengthM        *float64 `json:"camera_length_m,omitempty"`
	Magnification        *float64 `json:"magnification,omitempty"`
	PixelSizeM           *float64 `json:"pixel_size_m,omitempty"`
	Detector             string   `json:"detector,omitempty"`
	InnerAngleRad        *float64 `json:"inner_angle_rad,omitempty"`
	OuterAngleRad        *float64 `json:"outer_angle_rad,omitempty"`
	// UncertaintyFraction is the relative standard uncertainty (0.02 = 2 %).
	UncertaintyFraction *float64 `json:"uncertainty_fraction,omitempty"`

	Notes            string    `json:"notes"`
	RecordedBy       string    `json:"recorded_by"`
	RecordedAt       time.Time `json:"recorded_at"`
	Corrects         *string   `json:"corrects,omitempty"`
	CorrectionReason *string   `json:"correction_reason,omitempty"`
	// CorrectedBy names the calibration that corrects this one, if any.
	CorrectedBy *string `json:"corrected_by,omitempty"`
}

// NewCalibration is a calibration to record, with values already in SI.
type NewCalibration struct {
	InstrumentID         string
	Kind                 CalibrationKind
	EffectiveFrom        time.Time
	NominalCameraLengthM *float64
	CameraLengthM        *float64
	Magnification        *float64
	PixelSizeM           *float64
	Detector             string
	InnerAngleRad        *float64
	OuterAngleRad        *float64
	UncertaintyFraction  *float64
	Notes                string
	RecordedBy           string
	Corrects             *string
	CorrectionReason     *string
}

// Subject is what the calibration is of, so that the newest per subject is in force:
// the nominal camera length in millimetres, the magnification, or the detector name.
func (n NewCalibration) Subject() string {
	switch n.Kind {
	case CalibrationCameraLength:
		if n.NominalCameraLengthM != nil {
			return strconv.FormatFloat(*n.NominalCameraLengthM*1e3, 'g', 6, 64) + " mm"
		}
	case CalibrationPixelSize:
		if n.Magnification != nil {
			return strconv.FormatFloat(*n.Magnification, 'g', 6, 64) + "x"
		}
	case CalibrationDetectorAngles:
		return n.Detector
	}
	return ""
}

// Normalize checks the calibration: the values its kind needs, and only those, in
// physically possible ranges. Field names are the API's.
func (n *NewCalibration) Normalize(detectors []string) error {
	fe := beamledger.FieldErrors{}
	if !slices.Contains(CalibrationKinds, n.Kind) {
		fe.Add("kind", "must be one of camera_length, pixel_size, detector_angles")
	}
	if n.EffectiveFrom.IsZero() {
		fe.Add("effective_from", "is required (RFC 3339)")
	}
	need := func(field string, v *float64, want bool) {
		switch {
		case want && v == nil:
			fe.Add(field, "is required for a "+string(n.Kind)+" calibration")
		case !want && v != nil:
			fe.Add(field, "does not belong to a "+string(n.Kind)+" calibration")
		}
	}
	need("nominal_camera_length", n.NominalCameraLengthM, n.Kind == CalibrationCameraLength)
	need("camera_length", n.CameraLengthM, n.Kind == CalibrationCameraLength)
	need("magnification", n.Magnification, n.Kind == CalibrationPixelSize)
	need("pixel_size", n.PixelSizeM, n.Kind == CalibrationPixelSize)
	need("inner_angle", n.InnerAngleRad, n.Kind == CalibrationDetectorAngles)
	need("outer_angle", n.OuterAngleRad, n.Kind == CalibrationDetectorAngles)
	n.Detector = strings.TrimSpace(n.Detector)
	switch {
	case n.Kind == CalibrationDetectorAngles && !slices.Contains(detectors, n.Detector):
		fe.Add("detector", "must name one of the instrument's detectors: "+strings.Join(detectors, ", "))
	case n.Kind != CalibrationDetectorAngles && n.Detector != "":
		fe.Add("detector", "belongs only to a detector_angles calibration")
	}
	// Bounds: camera lengths from 1 mm to 100 m cover every projection system (effective
	// lengths past 10 m are used for small-angle work); magnifications 1× to 10⁹×;
	// specimen-plane pixels from 0.1 pm to 1 mm; collection angles below 1 rad for
	// inner and π/2 for outer edges, since a transmission detector sees forward scatter.
	in := func(field string, v *float64, lo, hi float64, words string) {
		if v != nil && (math.IsNaN(*v) || *v < lo || *v > hi) {
			fe.Add(field, words)
		}
	}
	in("nominal_camera_length", n.NominalCameraLengthM, 1e-3, 100, "must be between 1 mm and 100 m")
	in("camera_length", n.CameraLengthM, 1e-3, 100, "must be between 1 mm and 100 m")
	in("magnification", n.Magnification, 1, 1e9, "must be between 1 and 1e9")
	in("pixel_size", n.PixelSizeM, 1e-13, 1e-3, "must be between 0.1 pm and 1 mm")
	in("inner_angle", n.InnerAngleRad, 0, 0.999999, "must be at least 0 and below 1 rad")
	in("outer_angle", n.OuterAngleRad, 1e-9, math.Pi/2, "must be above 0 and at most π/2 rad")
	in("uncertainty", n.UncertaintyFraction, 0, 0.999999, "must be a fraction from 0 up to 1 (0.02 for 2 %)")
	if n.InnerAngleRad != nil && n.OuterAngleRad != nil && *n.InnerAngleRad >= *n.OuterAngleRad {
		fe.Add("outer_angle", "must be above the inner angle")
	}
	n.Notes = strings.TrimSpace(n.Notes)
	if utf8.RuneCountInString(n.Notes) > 4000 {
		fe.Add("notes", "is too long (at most 4000 characters)")
	}
	correctionFields(fe, n.Corrects, n.CorrectionReason)
	return fe.Err()
}

// correctionFields checks that a correction names what it corrects and why, together.
func correctionFields(fe beamledger.FieldErrors, corrects, reason *string) {
	if reason != nil {
		r := strings.TrimSpace(*reason)
		*reason = r
		if r == "" || utf8.RuneCountInString(r) > 1000 {
			fe.Add("reason", "must say why (1-1000 characters)")
		}
	}
	if (corrects == nil) != (reason == nil) {
		fe.Add("reason", "a correction names what it corrects (corrects) and why (reason), both or neither")
	}
}
