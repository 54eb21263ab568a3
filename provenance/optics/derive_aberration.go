package optics

import (
	"fmt"
	"math"
	"slices"
)

// deriveAberrations applies the π/4 criterion to each coefficient and the Scherzer
// conditions to C3, and finds the usable aperture: the smallest usable angle.
func (d *Derived) deriveAberrations(in Inputs, lambda float64) {
	type entry struct {
		info CoefficientInfo
		mag  float64
	}
	var entries []entry
	for _, ab := range in.Aberrations {
		info, ok := Coefficient(ab.Name)
		if !ok {
			d.Warnings = append(d.Warnings, "aberration "+ab.Name+" is not a known coefficient: left out")
			continue
		}
		entries = append(entries, entry{info, ab.MagnitudeM})
	}
	if len(entries) == 0 {
		return
	}
	slices.SortFunc(entries, func(a, b entry) int { return a.info.rank() - b.info.rank() })
	d.Conventions["aberration_criterion"] = conventionPiOver4
	d.Conventions["aberration_notation"] = conventionNotation
	usable, limiting := math.Inf(1), ""
	for _, e := range entries {
		krivanekM := e.info.KrivanekFactor * math.Abs(e.mag)
		row := AberrationLimit{Coefficient: e.info.Name, Order: e.info.Order, MagnitudeNm: e.mag * 1e9}
		if a := in.SemiAngleRad; a > 0 {
			limit := PiOver4LimitM(e.info.Order, lambda, a) / e.info.KrivanekFactor
			row.LimitAtApertureNm = d.number("aberration_limits "+e.info.Name+" limit_at_aperture_nm", limit*1e9)
		}
		if krivanekM > 0 {
			angle := PiOver4AngleRad(e.info.Order, lambda, krivanekM)
			row.UsableAngleMrad = d.number("aberration_limits "+e.info.Name+" usable_angle_mrad", angle*1e3)
			if row.UsableAngleMrad != nil && angle < usable {
				usable, limiting = angle, e.info.Name
			}
		}
		d.AberrationLimits = append(d.AberrationLimits, row)
		if e.info.Krivanek == "C30" {
			d.deriveScherzer(e.mag, lambda)
		}
	}
	if limiting == "" {
		return
	}
	d.UsableApertureMrad = d.number("usable_aperture_mrad", usable*1e3)
	d.LimitingCoefficient = limiting
	if a := in.SemiAngleRad; a > usable {
		d.Warnings = append(d.Warnings, fmt.Sprintf(
			"convergence_semiangle %.4g mrad is larger than the usable aperture %.4g mrad set by %s: the outer part of the probe is aberrated",
			a*1e3, usable*1e3, limiting))
	}
}

// deriveScherzer reports the Scherzer defocus and resolution for a positive Cs. A
// negative or zero C3 (a corrected column) has no Scherzer condition in this form.
func (d *Derived) deriveScherzer(csM, lambda float64) {
	if d.ScherzerDefocusNm != nil {
		return // C3 and its alias C30 both given: the first reported wins
	}
	if csM <= 0 {
		d.Warnings = append(d.Warnings, "C3 is not positive: no Scherzer defocus or resolution")
		return
	}
	d.ScherzerDefocusNm = d.number("scherzer_defocus_nm", ScherzerDefocusM(csM, lambda)*1e9)
	d.ScherzerResolutionNm = d.number("scherzer_resolution_nm", ScherzerResolutionM(csM, lambda)*1e9)
	d.Conventions["scherzer"] = conventionScherzer
	d.Conventions["defocus_sign"] = conventionDefocus
}
