package optics

import "math"

// CoefficientInfo describes one aberration coefficient name.
type CoefficientInfo struct {
	// Name is the name looked up: Haider (C1, A1, B2…) or Krivanek (C10, C12, C21…).
	Name string `json:"name"`
	// Krivanek is the C_{n,m} name of the same aberration, e.g. "C21" for B2.
	Krivanek string `json:"krivanek"`
	// Order is n: the wave aberration grows as α^(n+1).
	Order int `json:"order"`
	// Fold is m, the rotational symmetry; 0 for the round aberrations C1, C3, C5,
	// which have a sign but no azimuth.
	Fold int `json:"fold"`
	// KrivanekFactor converts a magnitude under this name to Krivanek's:
	// |C_{n,m}| = KrivanekFactor·|this|. Haider's B2, S3, B4, D4, S5 and R5 carry
	// (n+1), so B2 = 1 µm is the same aberration as C21 = 3 µm; every other name 1.
	KrivanekFactor float64 `json:"krivanek_factor"`
}

// coefficients is the name table in the order results are reported: by order, round
// aberration first, Haider before Krivanek.
var coefficients = []CoefficientInfo{
	{"C1", "C10", 1, 0, 1}, {"A1", "C12", 1, 2, 1},
	{"B2", "C21", 2, 1, 3}, {"A2", "C23", 2, 3, 1},
	{"C3", "C30", 3, 0, 1}, {"S3", "C32", 3, 2, 4}, {"A3", "C34", 3, 4, 1},
	{"B4", "C41", 4, 1, 5}, {"D4", "C43", 4, 3, 5}, {"A4", "C45", 4, 5, 1},
	{"C5", "C50", 5, 0, 1}, {"S5", "C52", 5, 2, 6}, {"R5", "C54", 5, 4, 6}, {"A5", "C56", 5, 6, 1},
}

// Coefficients lists every accepted name, Haider then Krivanek, in reporting order.
func Coefficients() []CoefficientInfo {
	out := make([]CoefficientInfo, 0, 2*len(coefficients))
	out = append(out, coefficients...)
	for _, c := range coefficients {
		out = append(out, CoefficientInfo{Name: c.Krivanek, Krivanek: c.Krivanek, Order: c.Order, Fold: c.Fold, KrivanekFactor: 1})
	}
	return out
}

// Coefficient looks a name up, so tunings and conditions validate names against one
// table. Names are case-sensitive, as printed by correctors.
func Coefficient(name string) (CoefficientInfo, bool) {
	for _, c := range coefficients {
		switch name {
		case c.Name:
			return c, true
		case c.Krivanek:
			return CoefficientInfo{Name: c.Krivanek, Krivanek: c.Krivanek, Order: c.Order, Fold: c.Fold, KrivanekFactor: 1}, true
		}
	}
	return CoefficientInfo{}, false
}

// rank orders names for reports: table position, the Krivanek alias right after its
// Haider name.
func (c CoefficientInfo) rank() int {
	for i, t := range coefficients {
		if t.Krivanek == c.Krivanek {
			if c.Name == t.Name {
				return 2 * i
			}
			return 2*i + 1
		}
	}
	return math.MaxInt
}

// PiOver4LimitM is the largest Krivanek magnitude |C_{n,m}| of order n whose phase
// (2π/λ)·|C|·α^(n+1)/(n+1) stays within π/4 out to angle α: (n+1)λ/(8α^(n+1)).
func PiOver4LimitM(order int, wavelengthM, angleRad float64) float64 {
	n1 := float64(order + 1)
	return n1 * wavelengthM / (8 * math.Pow(angleRad, n1))
}

// PiOver4AngleRad is the largest angle at which a Krivanek magnitude |C| of order n
// keeps its phase within π/4: ((n+1)λ/(8|C|))^(1/(n+1)). It is +Inf for C = 0.
func PiOver4AngleRad(order int, wavelengthM, magnitudeM float64) float64 {
	n1 := float64(order + 1)
	return math.Pow(n1*wavelengthM/(8*math.Abs(magnitudeM)), 1/n1)
}
