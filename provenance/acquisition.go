package provenance

import (
	"encoding/json"
	"errors"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
	"beamledger/accounts"
)

// Acquisition is the record of data taken during a booking. Its identity (booking,
// instrument, project, booked user) never changes; what was recorded is its newest
// version, and corrections add versions instead of changing one.
type Acquisition struct {
	ID           string    `json:"id"`
	BookingID    string    `json:"booking_id"`
	InstrumentID string    `json:"instrument_id"`
	ProjectID    string    `json:"project_id"`
	UserID       string    `json:"user_id"`
	CreatedBy    string    `json:"created_by"`
	CreatedAt    time.Time `json:"created_at"`
	AcquisitionVersion
}

// AcquisitionVersion is one state of an acquisition: version 1 as first recorded, each later one
// a correction with its reason and author.
type AcquisitionVersion struct {
	Version    int       `json:"version"`
	OperatorID string    `json:"operator_id"`
	SpecimenID *string   `json:"specimen_id"`
	StartedAt  time.Time `json:"started_at"`
	EndedAt    time.Time `json:"ended_at"`
	Notes      string    `json:"notes"`
	// Conditions are the operating conditions as recorded (SI with the original text).
	Conditions json.RawMessage `json:"conditions"`
	// Derived is the derive contract's object, computed from the conditions with the
	// calibrations and tuning in force applied.
	Derived        json.RawMessage `json:"derived"`
	FluenceEPerA2  *float64        `json:"fluence_e_per_angstrom2"`
	TuningID       *string         `json:"tuning_id"`
	CalibrationIDs []string        `json:"calibration_ids"`
	// Applied says what the server took from the instrument, its calibrations and its
	// tuning to compute the derived quantities.
	Applied []Applied `json:"applied"`
	// Warnings are accepted departures: a fluence budget passed, a condition outside
	// the instrument's limits where the facility allows it.
	Warnings  []string  `json:"warnings"`
	Reason    string    `json:"reason"`
	Author    string    `json:"author"`
	CreatedAt time.Time `json:"created_at"`
}

// Applied is one value the server supplied or replaced before deriving.
type Applied struct {
	Field  string `json:"field"`
	Source string `json:"source"` // "instrument", "calibration" or "tuning"
	ID     string `json:"id,omitempty"`
	Detail string `json:"detail"`
}

// AcquisitionInput is what a client sends to record or correct an acquisition.
type AcquisitionInput struct {
	BookingID  string          `json:"booking_id"`
	OperatorID string          `json:"operator_id"`
	SpecimenID string          `json:"specimen_id"`
	StartedAt  time.Time       `json:"started_at"`
	EndedAt    time.Time       `json:"ended_at"`
	Notes      string          `json:"notes"`
	Conditions json.RawMessage `json:"conditions"`
	// Reason and BaseVersion apply to corrections: why, and which version the
	// correction was made against (a stale one is a conflict, not a silent overwrite).
	Reason      string `json:"reason"`
	BaseVersion *int   `json:"base_version"`
}

// maxAcquisitionLength bounds one acquisition at two days: longer is a typing slip,
// and a real overnight series is recorded as several acquisitions.
const maxAcquisitionLength = 48 * time.Hour

// Normalize checks the input's own fields; correction says whether it is a correction
// (reason required, booking fixed). It parses the conditions so that a bad value is
// reported before any storage is touched, and returns their accelerating voltage,
// which selects the tuning in force.
func (in *AcquisitionInput) Normalize(correction bool) (voltageV float64, err error) {
	fe := beamledger.FieldErrors{}
	if !correction && !accounts.ValidID(in.BookingID) {
		fe.Add("booking_id", "must be a booking id")
	}
	if correction && in.BookingID != "" {
		fe.Add("booking_id", "cannot change: an acquisition stays with its booking")
	}
	if in.OperatorID != "" && !accounts.ValidID(in.OperatorID) {
		fe.Add("operator_id", "must be a user id")
	}
	if in.SpecimenID != "" && !accounts.ValidID(in.SpecimenID) {
		fe.Add("specimen_id", "must be a specimen id")
	}
	if in.StartedAt.IsZero() {
		fe.Add("started_at", "is required (RFC 3339)")
	}
	switch {
	case in.EndedAt.IsZero():
		fe.Add("ended_at", "is required (RFC 3339)")
	case !in.StartedAt.IsZero() && !in.EndedAt.After(in.StartedAt):
		fe.Add("ended_at", "must be after started_at")
	case in.EndedAt.Sub(in.StartedAt) > maxAcquisitionLength:
		fe.Add("ended_at", "must be at most 48 h after started_at; record a longer run as several acquisitions")
	}
	if utf8.RuneCountInString(in.Notes) > 10000 {
		fe.Add("notes", "is too long (at most 10000 characters)")
	}
	in.Reason = strings.TrimSpace(in.Reason)
	switch {
	case correction && (in.Reason == "" || utf8.RuneCountInString(in.Reason) > 1000):
		fe.Add("reason", "a correction says why (1-1000 characters)")
	case !correction && in.Reason != "":
		fe.Add("reason", "belongs to corrections only")
	}
	if len(in.Conditions) == 0 || string(in.Conditions) == "null" {
		fe.Add("conditions", "are required: at least {\"accelerating_voltage\": \"300 kV\"}")
	} else if c, err := ParseConditions(in.Conditions); err != nil {
		var e *beamledger.Error
		if errors.As(underConditions(err), &e) && len(e.Fields) > 0 {
			for k, v := range e.Fields {
				fe.Add(k, v)
			}
		} else {
			fe.Add("conditions", beamledger.FieldReason(err))
		}
	} else {
		voltageV = c.VoltageV()
	}
	return voltageV, fe.Err()
}

// AcquisitionFilter selects acquisitions; empty fields select everything.
type AcquisitionFilter struct {
	BookingID    string
	InstrumentID string
	ProjectID    string
	SpecimenID   string
	// ProjectIDs limits the listing to these projects when not nil (a researcher's own).
	ProjectIDs []string
	Limit      int
}
