package provenance

import (
	"math"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
)

// Coefficient is one measured aberration coefficient of a tuning, in SI: a magnitude
// in metres, an azimuth for the non-round aberrations, and the measurement's
// uncertainty. Text keeps what the person or instrument reported.
type Coefficient struct {
	Name         string   `json:"name"`
	Order        int      `json:"order"`
	MagnitudeM   float64  `json:"magnitude_m"`
	AngleRad     *float64 `json:"angle_rad,omitempty"`
	UncertaintyM *float64 `json:"uncertainty_m,omitempty"`
	Text         string   `json:"text"`
}

// Tuning is a dated snapshot of an instrument's corrector: its measured aberration
// coefficients at an accelerating voltage. It is never changed; a wrong one is
// corrected by a new tuning naming it, and the corrected one is then never in force.
type Tuning struct {
	ID           string        `json:"id"`
	InstrumentID string        `json:"instrument_id"`
	MeasuredAt   time.Time     `json:"measured_at"`
	VoltageV     *float64      `json:"accelerating_voltage_v,omitempty"`
	Coefficients []Coefficient `json:"coefficients"`
	Notes        string        `json:"notes"`
	RecordedBy   string        `json:"recorded_by"`
	RecordedAt   time.Time     `json:"recorded_at"`
	Corrects     *string       `json:"corrects,omitempty"`
	// CorrectionReason says why this tuning replaces the one it corrects.
	CorrectionReason *string `json:"correction_reason,omitempty"`
	// CorrectedBy names the tuning that corrects this one, if any.
	CorrectedBy *string `json:"corrected_by,omitempty"`
}

// NewTuning is a tuning to record, with its coefficients already parsed to SI.
type NewTuning struct {
	InstrumentID     string
	MeasuredAt       time.Time
	VoltageV         *float64
	Coefficients     []Coefficient
	Notes            string
	RecordedBy       string
	Corrects         *string
	CorrectionReason *string
}

// Normalize checks what the coefficient parser does not: the instant, the notes and
// the correction fields.
func (n *NewTuning) Normalize() error {
	fe := beamledger.FieldErrors{}
	if n.MeasuredAt.IsZero() {
		fe.Add("measured_at", "is required (RFC 3339)")
	}
	if len(n.Coefficients) == 0 {
		fe.Add("coefficients", "name at least one measured coefficient, e.g. {\"C3\": \"1.2 µm\"}")
	}
	if v := n.VoltageV; v != nil && (math.IsNaN(*v) || *v < 1e3 || *v > 3e6) {
		fe.Add("accelerating_voltage", "must be between 1 kV and 3 MV")
	}
	n.Notes = strings.TrimSpace(n.Notes)
	if utf8.RuneCountInString(n.Notes) > 4000 {
		fe.Add("notes", "is too long (at most 4000 characters)")
	}
	correctionFields(fe, n.Corrects, n.CorrectionReason)
	return fe.Err()
}
