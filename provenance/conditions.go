package provenance

import (
	"beamledger/provenance/optics"
)

// Quantity is one operating condition as given: its value in the SI unit, the unit's
// symbol (so the stored form reads on its own), and the user's own text ("300 kV"),
// or the number literal when a plain JSON number was given.
type Quantity struct {
	SI   float64 `json:"si"`
	Unit string  `json:"unit"`
	Text string  `json:"text"`
}

// Conditions are operating conditions normalised to SI, with the text the user gave.
// The JSON form is the stored form (a jsonb column): json.Unmarshal of it gives back
// an equal value. ParseConditions reads the client's form, which is different
// ("300 kV" where the stored form has {"si":300000,"unit":"V","text":"300 kV"}).
type Conditions struct {
	AcceleratingVoltage  Quantity  `json:"accelerating_voltage"`
	BeamCurrent          *Quantity `json:"beam_current,omitempty"`
	ConvergenceSemiangle *Quantity `json:"convergence_semiangle,omitempty"`
	DwellTime            *Quantity `json:"dwell_time,omitempty"`
	PixelSize            *Quantity `json:"pixel_size,omitempty"`
	FrameCount           *int      `json:"frame_count,omitempty"`
	FrameTime            *Quantity `json:"frame_time,omitempty"`
	CameraLength         *Quantity `json:"camera_length,omitempty"`
	ExposureTime         *Quantity `json:"exposure_time,omitempty"`
	IlluminatedDiameter  *Quantity `json:"illuminated_diameter,omitempty"`
	// Defocus is negative for underfocus.
	Defocus             *Quantity `json:"defocus,omitempty"`
	SpecimenTemperature *Quantity `json:"specimen_temperature,omitempty"`
	// Detectors keep the order given, since field errors name them by index.
	Detectors []DetectorGeometry `json:"detectors,omitempty"`
	// Aberrations are keyed by the coefficient name as given (Haider or Krivanek).
	Aberrations map[string]AberrationValue `json:"aberrations,omitempty"`
	// Extra holds free-form facility fields (holder, mode, aperture name…).
	Extra map[string]string `json:"extra,omitempty"`
}

// DetectorGeometry is one detector in use: by its radii on the detector plane (which
// need the camera length to become angles), by its collection semi-angles, or by name
// alone, for the caller to complete from the instrument or a calibration.
type DetectorGeometry struct {
	Name        string    `json:"name"`
	InnerRadius *Quantity `json:"inner_radius,omitempty"`
	OuterRadius *Quantity `json:"outer_radius,omitempty"`
	InnerAngle  *Quantity `json:"inner_angle,omitempty"`
	OuterAngle  *Quantity `json:"outer_angle,omitempty"`
}

// AberrationValue is one aberration coefficient: a magnitude (signed only for the round
// C1, C3, C5), and optionally the azimuth of a non-round one and the measurement's
// uncertainty.
type AberrationValue struct {
	Magnitude   Quantity  `json:"magnitude"`
	Angle       *Quantity `json:"angle,omitempty"`
	Uncertainty *Quantity `json:"uncertainty,omitempty"`
}

// VoltageV is the accelerating voltage in volts, for checking against the
// instrument's offered voltages.
func (c Conditions) VoltageV() float64 { return c.AcceleratingVoltage.SI }

// CameraLengthM is the camera length in metres, when given.
func (c Conditions) CameraLengthM() (float64, bool) {
	if c.CameraLength == nil {
		return 0, false
	}
	return c.CameraLength.SI, true
}

// DetectorNames lists the detectors' names in the order given.
func (c Conditions) DetectorNames() []string {
	names := make([]string, len(c.Detectors))
	for i, d := range c.Detectors {
		names[i] = d.Name
	}
	return names
}

// Inputs hands the conditions to optics as plain SI values. Detectors given by name
// alone have no geometry to compute with and are left out (Derive warns about them).
func (c Conditions) Inputs() optics.Inputs {
	in := optics.Inputs{
		VoltageV:             c.AcceleratingVoltage.SI,
		BeamCurrentA:         condSI(c.BeamCurrent),
		SemiAngleRad:         condSI(c.ConvergenceSemiangle),
		DwellS:               condSI(c.DwellTime),
		PixelSizeM:           condSI(c.PixelSize),
		FrameTimeS:           condSI(c.FrameTime),
		CameraLengthM:        condSI(c.CameraLength),
		ExposureS:            condSI(c.ExposureTime),
		IlluminatedDiameterM: condSI(c.IlluminatedDiameter),
	}
	if c.FrameCount != nil {
		in.FrameCount = *c.FrameCount
	}
	for _, d := range c.Detectors {
		switch {
		case d.InnerAngle != nil && d.OuterAngle != nil:
			in.Detectors = append(in.Detectors, optics.DetectorInput{Name: d.Name,
				InnerAngleRad: d.InnerAngle.SI, OuterAngleRad: d.OuterAngle.SI, ByAngle: true})
		case d.InnerRadius != nil && d.OuterRadius != nil:
			in.Detectors = append(in.Detectors, optics.DetectorInput{Name: d.Name,
				InnerRadiusM: d.InnerRadius.SI, OuterRadiusM: d.OuterRadius.SI})
		}
	}
	for _, name := range condSortedKeys(c.Aberrations) {
		in.Aberrations = append(in.Aberrations, optics.AberrationInput{Name: name, MagnitudeM: c.Aberrations[name].Magnitude.SI})
	}
	return in
}

// Derive computes the derived quantities under the facility's settings, which the
// caller has validated. Defocus, specimen temperature and extra do not enter.
func (c Conditions) Derive(s optics.Settings) optics.Derived {
	d := optics.Derive(c.Inputs(), s)
	for _, det := range c.Detectors {
		if (det.InnerAngle == nil || det.OuterAngle == nil) && (det.InnerRadius == nil || det.OuterRadius == nil) {
			d.Warnings = append(d.Warnings, "detector "+det.Name+" has no radii or angles: no collection angles for it")
		}
	}
	return d
}

func condSI(q *Quantity) float64 {
	if q == nil {
		return 0
	}
	return q.SI
}
