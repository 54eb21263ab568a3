package quantity

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Format writes an SI value in its dimension's canonical unit with the shortest digits
// that read back to the same float, so Parse(Format(v, d)) returns v exactly.
func Format(si float64, d Dimension) string {
	return strconv.FormatFloat(si, 'g', -1, 64) + " " + d.Unit()
}

// FormatIn writes an SI value in the named unit, e.g. FormatIn(3e5, "kV") is
// "300 kV". Powers of ten shift the decimal text, so for units that are a power of ten
// of the SI unit (kV, mrad, µs, Å, nm…) the result parses back to exactly si; degrees
// of arc and degrees Celsius round-trip to within a few units in the last place.
func FormatIn(si float64, unitSymbol string) (string, error) {
	if math.IsNaN(si) || math.IsInf(si, 0) {
		return "", fmt.Errorf("%w: %v", ErrRange, si)
	}
	u, pexp, ok := lookupUnit(unitSymbol)
	if !ok {
		return "", fmt.Errorf("%w %q", ErrUnit, unitSymbol)
	}
	v := (si - u.offset) / u.scale
	return shiftDecimal(v, -(pexp+u.exp10)) + " " + unitSymbol, nil
}

// shiftDecimal writes v×10^shift using v's shortest decimal digits, moving the
// decimal point rather than multiplying, in plain notation for everyday magnitudes
// and exponent notation for the rest.
func shiftDecimal(v float64, shift int) string {
	e := strconv.FormatFloat(v, 'e', -1, 64) // "-1.5e-06"
	neg := strings.HasPrefix(e, "-")
	e = strings.TrimPrefix(e, "-")
	mant, expText, _ := strings.Cut(e, "e")
	exp, _ := strconv.Atoi(expText)
	exp += shift
	digits := strings.Replace(mant, ".", "", 1)
	sign := ""
	if neg {
		sign = "-"
	}
	switch {
	case digits == "0":
		return sign + "0"
	case exp >= 0 && exp < 21:
		// Plain notation: pad with zeros or place the point inside the digits.
		if len(digits) <= exp+1 {
			return sign + digits + strings.Repeat("0", exp+1-len(digits))
		}
		return sign + digits[:exp+1] + "." + digits[exp+1:]
	case exp < 0 && exp >= -6:
		return sign + "0." + strings.Repeat("0", -exp-1) + digits
	}
	m := digits[:1]
	if len(digits) > 1 {
		m += "." + digits[1:]
	}
	return sign + m + "e" + strconv.Itoa(exp)
}
