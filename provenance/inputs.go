package provenance

import (
	"bytes"
	"encoding/json"
	"math"
	"strings"
	"time"

	"beamledger"
	"beamledger/provenance/optics"
	"beamledger/provenance/quantity"
)

// TuningInput is what a client sends to record a tuning. Coefficients are keyed by
// name (Haider C1, A1, B2, … or Krivanek C10, C12, C21, …); each value is a length
// ("1.2 µm", or metres as a number) or an object {"magnitude", "angle", "uncertainty"}.
type TuningInput struct {
	MeasuredAt          time.Time       `json:"measured_at"`
	AcceleratingVoltage json.RawMessage `json:"accelerating_voltage"`
	Coefficients        json.RawMessage `json:"coefficients"`
	Notes               string          `json:"notes"`
	Corrects            *string         `json:"corrects"`
	Reason              *string         `json:"reason"`
}

// Tuning converts the input to SI and checks it, naming each bad field. The
// coefficients are read as the aberrations of operating conditions are, so a name or
// value accepted in one place is accepted in the other.
func (in TuningInput) Tuning(instrumentID, recordedBy string) (NewTuning, error) {
	fe := beamledger.FieldErrors{}
	n := NewTuning{InstrumentID: instrumentID, MeasuredAt: in.MeasuredAt, Notes: in.Notes, RecordedBy: recordedBy,
		Corrects: in.Corrects, CorrectionReason: in.Reason}
	n.VoltageV = quantityField(fe, "accelerating_voltage", in.AcceleratingVoltage, quantity.Voltage)
	if len(in.Coefficients) > 0 {
		inner := beamledger.FieldErrors{}
		values := condAberrations(inner, in.Coefficients)
		for k, v := range inner {
			fe.Add("coefficients"+strings.TrimPrefix(k, "aberrations"), v)
		}
		for _, name := range condSortedKeys(values) {
			v := values[name]
			info, _ := optics.Coefficient(name)
			co := Coefficient{Name: name, Order: info.Order, MagnitudeM: v.Magnitude.SI, Text: v.Magnitude.Text}
			if v.Angle != nil {
				co.AngleRad = &v.Angle.SI
			}
			if v.Uncertainty != nil {
				co.UncertaintyM = &v.Uncertainty.SI
			}
			n.Coefficients = append(n.Coefficients, co)
		}
	}
	if err := fe.Err(); err != nil {
		return n, err
	}
	return n, n.Normalize()
}

// CalibrationInput is what a client sends to record a calibration. Lengths and angles
// are quantity strings ("80 mm", "68 mrad") or SI numbers.
type CalibrationInput struct {
	Kind                CalibrationKind `json:"kind"`
	EffectiveFrom       time.Time       `json:"effective_from"`
	NominalCameraLength json.RawMessage `json:"nominal_camera_length"`
	CameraLength        json.RawMessage `json:"camera_length"`
	Magnification       *float64        `json:"magnification"`
	PixelSize           json.RawMessage `json:"pixel_size"`
	Detector            string          `json:"detector"`
	InnerAngle          json.RawMessage `json:"inner_angle"`
	OuterAngle          json.RawMessage `json:"outer_angle"`
	Uncertainty         *float64        `json:"uncertainty"`
	Notes               string          `json:"notes"`
	Corrects            *string         `json:"corrects"`
	Reason              *string         `json:"reason"`
}

// Calibration converts the input to SI and checks it against the instrument's
// detector names, naming each bad field.
func (in CalibrationInput) Calibration(instrumentID, recordedBy string, detectors []string) (NewCalibration, error) {
	fe := beamledger.FieldErrors{}
	n := NewCalibration{InstrumentID: instrumentID, Kind: in.Kind, EffectiveFrom: in.EffectiveFrom,
		Magnification: in.Magnification, Detector: in.Detector, UncertaintyFraction: in.Uncertainty,
		Notes: in.Notes, RecordedBy: recordedBy, Corrects: in.Corrects, CorrectionReason: in.Reason}
	n.NominalCameraLengthM = quantityField(fe, "nominal_camera_length", in.NominalCameraLength, quantity.Length)
	n.CameraLengthM = quantityField(fe, "camera_length", in.CameraLength, quantity.Length)
	n.PixelSizeM = quantityField(fe, "pixel_size", in.PixelSize, quantity.Length)
	n.InnerAngleRad = quantityField(fe, "inner_angle", in.InnerAngle, quantity.Angle)
	n.OuterAngleRad = quantityField(fe, "outer_angle", in.OuterAngle, quantity.Angle)
	if err := fe.Err(); err != nil {
		return n, err
	}
	return n, n.Normalize(detectors)
}

// quantityField reads an optional quantity string or SI number; the caller's
// Normalize checks the range, so any finite value passes here.
func quantityField(fe beamledger.FieldErrors, field string, raw json.RawMessage, dim quantity.Dimension) *float64 {
	if t := bytes.TrimSpace(raw); len(t) == 0 || string(t) == "null" {
		return nil
	}
	q := condQuantity(fe, field, raw, dim, condRange{-math.MaxFloat64, math.MaxFloat64, false, false, ""})
	if q == nil {
		return nil
	}
	return &q.SI
}
