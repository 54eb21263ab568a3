package optics

import (
	"fmt"
	"math"
	"strings"
)

// Inputs are operating conditions in SI, as Derive needs them. A zero value means
// "not given": none of these quantities is zero in a real acquisition, and the caller
// (provenance.Conditions) has already refused zeros and negatives.
type Inputs struct {
	VoltageV             float64
	BeamCurrentA         float64
	SemiAngleRad         float64
	DwellS               float64
	PixelSizeM           float64
	FrameCount           int
	FrameTimeS           float64
	CameraLengthM        float64
	ExposureS            float64
	IlluminatedDiameterM float64
	Detectors            []DetectorInput
	Aberrations          []AberrationInput
}

// DetectorInput is one detector by its radii on the detector plane (converted with
// the camera length) or, when ByAngle, by its calibrated collection angles.
type DetectorInput struct {
	Name                         string
	InnerRadiusM, OuterRadiusM   float64
	InnerAngleRad, OuterAngleRad float64
	ByAngle                      bool
}

// AberrationInput is one coefficient under a name Coefficient knows, with its
// magnitude in metres (signed for the round aberrations).
type AberrationInput struct {
	Name       string
	MagnitudeM float64
}

// Derived is the result of Derive, marshalled as is by `beamledger derive` and the
// API: numbers in the unit their key names, a key left out when its inputs are absent.
type Derived struct {
	WavelengthPm                    *float64          `json:"wavelength_pm,omitempty"`
	LorentzFactor                   *float64          `json:"lorentz_factor,omitempty"`
	SpeedFractionOfLight            *float64          `json:"speed_fraction_of_light,omitempty"`
	InteractionConstantRadPerVoltNm *float64          `json:"interaction_constant_rad_per_volt_nm,omitempty"`
	ProbeDiameterDiffractionPm      *float64          `json:"probe_diameter_diffraction_pm,omitempty"`
	NyquistPixelADFPm               *float64          `json:"nyquist_pixel_adf_pm,omitempty"`
	NyquistPixelBFPm                *float64          `json:"nyquist_pixel_bf_pm,omitempty"`
	Sampling                        string            `json:"sampling,omitempty"`
	FluenceEPerAngstrom2            *float64          `json:"fluence_e_per_angstrom2,omitempty"`
	FluenceRateEPerAngstrom2S       *float64          `json:"fluence_rate_e_per_angstrom2_s,omitempty"`
	Detectors                       []DetectorAngles  `json:"detectors,omitempty"`
	AberrationLimits                []AberrationLimit `json:"aberration_limits,omitempty"`
	UsableApertureMrad              *float64          `json:"usable_aperture_mrad,omitempty"`
	LimitingCoefficient             string            `json:"limiting_coefficient,omitempty"`
	ScherzerDefocusNm               *float64          `json:"scherzer_defocus_nm,omitempty"`
	ScherzerResolutionNm            *float64          `json:"scherzer_resolution_nm,omitempty"`
	// Constants names the CODATA edition used.
	Constants string `json:"constants"`
	// Conventions names, for each convention a number above depends on, which one was
	// used, since books differ (Scherzer 1.155 vs 1.2, semi- vs full angle...).
	Conventions map[string]string `json:"conventions"`
	// Warnings are never null, so clients can range over them without a check.
	Warnings []string `json:"warnings"`
}

// Sampling verdicts for the ADF Nyquist criterion.
const (
	SamplingAdequate     = "adequate"
	SamplingUndersampled = "undersampled"
)

// DetectorAngles is one detector's collection range and regime. Regime is empty when
// no convergence semi-angle was given to compare against.
type DetectorAngles struct {
	Name      string  `json:"name"`
	InnerMrad float64 `json:"inner_mrad"`
	OuterMrad float64 `json:"outer_mrad"`
	Regime    Regime  `json:"regime,omitempty"`
}

// AberrationLimit is the π/4 verdict on one coefficient. MagnitudeNm and
// LimitAtApertureNm are in the coefficient's own notation (a B2 limit is a B2 value);
// UsableAngleMrad is absent for a zero coefficient, which limits nothing.
type AberrationLimit struct {
	Coefficient       string   `json:"coefficient"`
	Order             int      `json:"order"`
	MagnitudeNm       float64  `json:"magnitude_nm"`
	LimitAtApertureNm *float64 `json:"limit_at_aperture_nm,omitempty"`
	UsableAngleMrad   *float64 `json:"usable_angle_mrad,omitempty"`
}

// Convention texts, reported beside the values that depend on them.
const (
	conventionWavelength = "relativistic: λ = h/√(2m₀eV(1 + eV/2m₀c²))"
	conventionAngle      = "convergence and collection angles are semi-angles; θ = r/L with r the detector radius, L the calibrated camera length"
	conventionFluence    = "STEM: I·τ_dwell·frames/(e·pixel area), per pixel area not probe area; TEM: I·t/(e·πd²/4)"
	conventionDefocus    = "underfocus negative"
	conventionScherzer   = "Δf = −√(4/3)·√(Cs λ); resolution 0.66·(Cs λ³)^¼ (Scherzer 1949)"
	conventionPiOver4    = "π/4: (2π/λ)·|C_{n,m}|·α^(n+1)/(n+1) ≤ π/4 (Krivanek et al. 1999)"
	conventionNotation   = "Haider names (C1 A1 B2 A2 C3 S3 A3 …) or Krivanek C_{n,m}; B2, S3, B4, D4, S5, R5 are (n+1) times smaller than their C_{n,m}"
)

// Derive computes every derived quantity the inputs allow. It never fails: what
// cannot be computed is left out, and what looks like a mistake is a warning.
func Derive(in Inputs, s Settings) Derived {
	d := Derived{Constants: ConstantsEdition, Conventions: map[string]string{}, Warnings: []string{}}
	if !(in.VoltageV > 0) {
		d.Warnings = append(d.Warnings, "no accelerating voltage: nothing derived")
		return d
	}
	lambda := WavelengthM(in.VoltageV)
	d.WavelengthPm = d.number("wavelength_pm", lambda*1e12)
	d.LorentzFactor = d.number("lorentz_factor", LorentzFactor(in.VoltageV))
	d.SpeedFractionOfLight = d.number("speed_fraction_of_light", SpeedFraction(in.VoltageV))
	d.InteractionConstantRadPerVoltNm = d.number("interaction_constant_rad_per_volt_nm", InteractionConstantRadPerVM(in.VoltageV)*1e-9)
	d.Conventions["wavelength"] = conventionWavelength
	d.deriveProbe(in, lambda)
	d.deriveFluence(in)
	d.deriveDetectors(in, s)
	d.deriveAberrations(in, lambda)
	return d
}

// number keeps a finite result and turns anything else into a warning, since JSON has
// no Inf or NaN and an absurd figure is worse than none.
func (d *Derived) number(key string, v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		d.Warnings = append(d.Warnings, key+" not reported: the inputs put it out of range")
		return nil
	}
	return &v
}

func (d *Derived) deriveProbe(in Inputs, lambda float64) {
	a := in.SemiAngleRad
	if a <= 0 {
		return
	}
	d.Conventions["angles"] = conventionAngle
	d.ProbeDiameterDiffractionPm = d.number("probe_diameter_diffraction_pm", ProbeDiameterDiffractionM(lambda, a)*1e12)
	adf := NyquistPixelADFM(lambda, a)
	d.NyquistPixelADFPm = d.number("nyquist_pixel_adf_pm", adf*1e12)
	d.NyquistPixelBFPm = d.number("nyquist_pixel_bf_pm", NyquistPixelBFM(lambda, a)*1e12)
	if in.PixelSizeM <= 0 || d.NyquistPixelADFPm == nil {
		return
	}
	d.Sampling = SamplingAdequate
	if in.PixelSizeM > adf {
		d.Sampling = SamplingUndersampled
		d.Warnings = append(d.Warnings, fmt.Sprintf(
			"pixel_size %.4g pm is larger than the ADF Nyquist pixel λ/4α = %.4g pm: ADF images cannot hold the probe's full resolution",
			in.PixelSizeM*1e12, adf*1e12))
	}
}

func (d *Derived) deriveFluence(in Inputs) {
	if in.BeamCurrentA <= 0 {
		return
	}
	stem := in.DwellS > 0 && in.PixelSizeM > 0
	tem := in.ExposureS > 0 && in.IlluminatedDiameterM > 0
	switch {
	case stem:
		if tem {
			d.Warnings = append(d.Warnings, "both STEM (dwell_time, pixel_size) and TEM (exposure_time, illuminated_diameter) inputs given: fluence uses the STEM ones")
		}
		frames := max(in.FrameCount, 1)
		d.FluenceEPerAngstrom2 = d.number("fluence_e_per_angstrom2", STEMFluenceEPerAngstrom2(in.BeamCurrentA, in.DwellS, in.PixelSizeM, frames))
		if in.FrameTimeS > 0 && d.FluenceEPerAngstrom2 != nil {
			d.FluenceRateEPerAngstrom2S = d.number("fluence_rate_e_per_angstrom2_s", *d.FluenceEPerAngstrom2/float64(frames)/in.FrameTimeS)
		}
	case tem:
		d.FluenceEPerAngstrom2 = d.number("fluence_e_per_angstrom2", TEMFluenceEPerAngstrom2(in.BeamCurrentA, in.ExposureS, in.IlluminatedDiameterM))
		if d.FluenceEPerAngstrom2 != nil {
			d.FluenceRateEPerAngstrom2S = d.number("fluence_rate_e_per_angstrom2_s", *d.FluenceEPerAngstrom2/in.ExposureS)
		}
	default:
		d.Warnings = append(d.Warnings, "beam_current given but no fluence: it needs dwell_time and pixel_size (STEM) or exposure_time and illuminated_diameter (TEM)")
		return
	}
	d.Conventions["fluence"] = conventionFluence
}

func (d *Derived) deriveDetectors(in Inputs, s Settings) {
	if len(in.Detectors) > 0 && in.SemiAngleRad <= 0 {
		d.Warnings = append(d.Warnings, "detector regimes need convergence_semiangle")
	}
	for _, det := range in.Detectors {
		inner, outer := det.InnerAngleRad, det.OuterAngleRad
		if !det.ByAngle {
			if in.CameraLengthM <= 0 {
				d.Warnings = append(d.Warnings, "detector "+det.Name+" given by radius without camera_length: left out")
				continue
			}
			inner, outer = CollectionAngleRad(det.InnerRadiusM, in.CameraLengthM), CollectionAngleRad(det.OuterRadiusM, in.CameraLengthM)
		}
		d.Conventions["angles"] = conventionAngle
		out := DetectorAngles{Name: det.Name, InnerMrad: inner * 1e3, OuterMrad: outer * 1e3}
		if a := in.SemiAngleRad; a > 0 {
			out.Regime = s.DetectorRegime(inner, outer, a)
			d.warnRegime(det.Name, out.Regime, inner, outer, a)
		}
		d.Detectors = append(d.Detectors, out)
	}
}

// warnRegime flags collectors that overlap the bright-field disc in a way their owner
// probably did not intend: any that straddle the disc edge, and any named like a
// dark-field detector that sits inside the disc.
func (d *Derived) warnRegime(name string, r Regime, inner, outer, a float64) {
	span := fmt.Sprintf("%.4g–%.4g mrad", inner*1e3, outer*1e3)
	switch {
	case r == RegimeMixed:
		d.Warnings = append(d.Warnings, fmt.Sprintf(
			"detector %s (%s) straddles the bright-field disc edge at α = %.4g mrad: its signal mixes bright- and dark-field contrast",
			name, span, a*1e3))
	case (r == RegimeBF || r == RegimeABF) && strings.Contains(strings.ToUpper(name), "DF"):
		d.Warnings = append(d.Warnings, fmt.Sprintf(
			"detector %s is named like a dark-field detector but collects %s, inside the bright-field disc (α = %.4g mrad)",
			name, span, a*1e3))
	}
}
