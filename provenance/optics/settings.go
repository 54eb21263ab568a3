package optics

import (
	"errors"
	"fmt"
	"math"
)

// Regime is how a detector's collection range sits against the bright-field disc,
// which decides the contrast it records.
type Regime string

// Detector regimes [practice; thresholds in Settings].
const (
	RegimeBF    Regime = "BF"    // inside the disc, reaching its centre
	RegimeABF   Regime = "ABF"   // an annulus in the outer part of the disc
	RegimeLAADF Regime = "LAADF" // just outside the disc: strain and diffraction contrast
	RegimeHAADF Regime = "HAADF" // far outside: incoherent, roughly Z-contrast
	RegimeMixed Regime = "mixed" // straddles the disc edge, mixing bright and dark field
)

// Settings are the facility's thresholds for naming detector regimes. The boundaries
// are conventions of the trade rather than physics, and facilities draw them a little
// differently, so they are configuration with defaults.
type Settings struct {
	// ABFInnerFraction: a collector inside the disc (outer ≤ α) whose inner angle is at
	// least this fraction of α is ABF; below it, BF.
	ABFInnerFraction float64 `json:"abf_inner_fraction"`
	// HAADFInnerMultiple and HAADFInnerMinRad: a collector outside the disc (inner ≥ α)
	// is HAADF when its inner angle is at least this multiple of α and at least this
	// angle; otherwise LAADF.
	HAADFInnerMultiple float64 `json:"haadf_inner_multiple"`
	HAADFInnerMinRad   float64 `json:"haadf_inner_min_rad"`
}

// DefaultSettings are the common boundaries: ABF from α/2 to α, HAADF from 3α and
// 50 mrad [practice].
func DefaultSettings() Settings {
	return Settings{ABFInnerFraction: 0.5, HAADFInnerMultiple: 3, HAADFInnerMinRad: 0.050}
}

// Validate reports every threshold that would make the regimes overlap or vanish.
func (s Settings) Validate() error {
	var errs []error
	if !(s.ABFInnerFraction > 0 && s.ABFInnerFraction < 1) {
		// At 0 every BF detector would be ABF; at 1 none could be.
		errs = append(errs, fmt.Errorf("abf_inner_fraction: must lie strictly between 0 and 1, got %v", s.ABFInnerFraction))
	}
	if !(s.HAADFInnerMultiple >= 1 && s.HAADFInnerMultiple <= 100) {
		// Below 1 the HAADF range would reach into the bright-field disc.
		errs = append(errs, fmt.Errorf("haadf_inner_multiple: must lie between 1 and 100, got %v", s.HAADFInnerMultiple))
	}
	if !(s.HAADFInnerMinRad >= 0 && s.HAADFInnerMinRad < math.Pi/2) {
		// Transmission detectors collect forward scattering only: below 90°.
		errs = append(errs, fmt.Errorf("haadf_inner_min_rad: must lie between 0 and π/2, got %v", s.HAADFInnerMinRad))
	}
	return errors.Join(errs...)
}

// DetectorRegime names the regime of a collector from innerRad to outerRad under a
// probe of convergence semi-angle semiAngleRad.
func (s Settings) DetectorRegime(innerRad, outerRad, semiAngleRad float64) Regime {
	a := semiAngleRad
	switch {
	case atMost(outerRad, a) && atLeast(innerRad, s.ABFInnerFraction*a):
		return RegimeABF
	case atMost(outerRad, a):
		return RegimeBF
	case atLeast(innerRad, a) && atLeast(innerRad, s.HAADFInnerMultiple*a) && atLeast(innerRad, s.HAADFInnerMinRad):
		return RegimeHAADF
	case atLeast(innerRad, a):
		return RegimeLAADF
	}
	return RegimeMixed
}

// boundarySlack lets a value typed exactly on a boundary count as on it: 3 × 25 mrad
// is 0.07500000000000001 in floating point, and a 75 mrad inner angle is meant as 3α.
const boundarySlack = 1e-12

func atLeast(x, bound float64) bool { return x >= bound*(1-boundarySlack) }
func atMost(x, bound float64) bool  { return x <= bound*(1+boundarySlack) }
