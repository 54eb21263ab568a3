package provenance

import (
	"encoding/json"
	"fmt"
	"math"
	"strings"

	"beamledger"
	"beamledger/provenance/optics"
	"beamledger/provenance/quantity"
)

var (
	// A disc detector has inner radius or angle 0, so 0 is allowed for inner edges.
	condDetectorRadius = condRange{0, maxDetectorM, false, false, "must be between 0 and 1 m"}
	condDetectorAngle  = condRange{0, maxDetectorRad, false, true, "must be at least 0 and below π/2 rad (90°)"}
	// A coefficient of a working lens is below a metre; the sign is checked apart.
	condAberrationMagnitude = condRange{-maxAberrationM, maxAberrationM, false, false, "must be within ±1 m"}
	// Azimuths come as 0–360° or ±180°; beyond a full turn either way is a slip.
	condAberrationAngle       = condRange{-2 * math.Pi, 2 * math.Pi, false, false, "must be within ±360°"}
	condAberrationUncertainty = condRange{0, maxAberrationM, false, false, "must be between 0 and 1 m"}
)

// condDetectors reads the detector list. Each detector is named, and has either both
// radii, both angles, or neither (to be completed by the caller from the instrument
// or a calibration); radii need a camera length to become angles.
func condDetectors(fe beamledger.FieldErrors, raw json.RawMessage, haveCameraLength bool, cameraLength *Quantity) []DetectorGeometry {
	var list []json.RawMessage
	if err := json.Unmarshal(raw, &list); err != nil {
		fe.Add("detectors", `must be a list of {"name", "inner_radius", "outer_radius"} or {"name", "inner_angle", "outer_angle"}`)
		return nil
	}
	if len(list) > maxDetectors {
		fe.Add("detectors", fmt.Sprintf("may list at most %d detectors", maxDetectors))
		return nil
	}
	var out []DetectorGeometry
	seen := map[string]bool{}
	for i, item := range list {
		field := fmt.Sprintf("detectors[%d]", i)
		d, ok := condDetector(fe, field, item, haveCameraLength, cameraLength)
		if !ok {
			continue
		}
		if seen[d.Name] {
			fe.Add(field+".name", "names a detector already listed")
			continue
		}
		seen[d.Name] = true
		out = append(out, d)
	}
	return out
}

func condDetector(fe beamledger.FieldErrors, field string, raw json.RawMessage, haveCameraLength bool, cameraLength *Quantity) (DetectorGeometry, bool) {
	before := len(fe)
	m, err := condObject(raw)
	if err != nil {
		fe.Add(field, err.Error())
		return DetectorGeometry{}, false
	}
	condMembersOnly(fe, field, m, "name", "inner_radius", "outer_radius", "inner_angle", "outer_angle")
	var d DetectorGeometry
	if err := json.Unmarshal(m["name"], &d.Name); err != nil {
		fe.Add(field+".name", "is required and must be a string")
	} else if why := condName(d.Name); why != "" {
		fe.Add(field+".name", why)
	}
	ir, or := m["inner_radius"] != nil, m["outer_radius"] != nil
	ia, oa := m["inner_angle"] != nil, m["outer_angle"] != nil
	switch {
	case (ir || or) && (ia || oa):
		fe.Add(field, "give inner_radius and outer_radius, or inner_angle and outer_angle, not both")
	case ir || or:
		d.InnerRadius, d.OuterRadius = condEdges(fe, field, m, "radius", quantity.Length, condDetectorRadius)
		switch {
		case !haveCameraLength:
			fe.Add(field+".inner_radius", "needs camera_length to become a collection angle (θ = r/L)")
		case cameraLength != nil && d.OuterRadius != nil && d.OuterRadius.SI/cameraLength.SI >= maxDetectorRad:
			// θ = r/L is the small-angle form; past 90° no transmission detector collects.
			fe.Add(field+".outer_radius", fmt.Sprintf("at camera_length %s gives %.3g rad, beyond any transmission detector (is it a diameter, or the wrong unit?)",
				cameraLength.Text, d.OuterRadius.SI/cameraLength.SI))
		}
	case ia || oa:
		d.InnerAngle, d.OuterAngle = condEdges(fe, field, m, "angle", quantity.Angle, condDetectorAngle)
	}
	return d, len(fe) == before
}

// condEdges reads an inner/outer pair, both required, the outer beyond the inner.
// Values are radii or angles of the detector's edges: radius, not diameter.
func condEdges(fe beamledger.FieldErrors, field string, m map[string]json.RawMessage, what string, dim quantity.Dimension, rng condRange) (*Quantity, *Quantity) {
	var inner, outer *Quantity
	for _, e := range []struct {
		key string
		dst **Quantity
	}{{"inner_" + what, &inner}, {"outer_" + what, &outer}} {
		v := m[e.key]
		if v == nil {
			fe.Add(field+"."+e.key, "is required with the other edge")
			continue
		}
		*e.dst = condQuantity(fe, field+"."+e.key, v, dim, rng)
	}
	if inner != nil && outer != nil && !(outer.SI > inner.SI) {
		fe.Add(field+".outer_"+what, "must be larger than inner_"+what)
	}
	return inner, outer
}

// condAberrations reads coefficients keyed by name; a value is a quantity string, a
// number in metres, or {"magnitude", "angle", "uncertainty"}. Two names for the same
// aberration (C3 and C30, B2 and C21) are refused: which would be meant?
func condAberrations(fe beamledger.FieldErrors, raw json.RawMessage) map[string]AberrationValue {
	m, err := condObject(raw)
	if err != nil {
		fe.Add("aberrations", err.Error())
		return nil
	}
	out := map[string]AberrationValue{}
	byKrivanek := map[string]string{}
	for _, name := range condSortedKeys(m) {
		field := "aberrations." + name
		if m[name] == nil {
			continue // null: not measured
		}
		info, ok := optics.Coefficient(name)
		if !ok {
			fe.Add(field, "is not a coefficient name (C1 A1 B2 A2 C3 S3 A3 B4 D4 A4 C5 S5 R5 A5, or Krivanek C10 C12 C21 …)")
			continue
		}
		if other, dup := byKrivanek[info.Krivanek]; dup {
			fe.Add(field, "is the same aberration as "+other+"; give it once")
			continue
		}
		byKrivanek[info.Krivanek] = name
		if v, ok := condAberration(fe, field, m[name], info); ok {
			out[name] = v
		}
	}
	if len(out) == 0 {
		return nil
	}
	return out
}

func condAberration(fe beamledger.FieldErrors, field string, raw json.RawMessage, info optics.CoefficientInfo) (AberrationValue, bool) {
	before := len(fe)
	var v AberrationValue
	magField := field
	if t := strings.TrimSpace(string(raw)); strings.HasPrefix(t, "{") {
		parts, err := condObject(raw)
		if err != nil {
			fe.Add(field, err.Error())
			return v, false
		}
		condMembersOnly(fe, field, parts, "magnitude", "angle", "uncertainty")
		magField = field + ".magnitude"
		if a := parts["angle"]; a != nil {
			if info.Fold == 0 {
				fe.Add(field+".angle", info.Name+" is round: it has no azimuth")
			} else {
				v.Angle = condQuantity(fe, field+".angle", a, quantity.Angle, condAberrationAngle)
			}
		}
		if u := parts["uncertainty"]; u != nil {
			v.Uncertainty = condQuantity(fe, field+".uncertainty", u, quantity.Length, condAberrationUncertainty)
		}
		raw = parts["magnitude"]
		if raw == nil {
			fe.Add(magField, "is required")
			return v, false
		}
	}
	if q := condQuantity(fe, magField, raw, quantity.Length, condAberrationMagnitude); q != nil {
		if q.SI < 0 && info.Fold != 0 {
			// Only round aberrations have a sign; a non-round one points its way by angle.
			fe.Add(magField, info.Name+" is not round: give a magnitude ≥ 0 and its direction as angle")
		}
		v.Magnitude = *q
	}
	return v, len(fe) == before
}
