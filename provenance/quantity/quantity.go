// Package quantity reads and writes the "number unit" strings people type for operating
// conditions ("300 kV", "25 mrad", "2 µs", "0.1 Å", "-20 °C") and turns them into SI
// values of a known dimension.
//
// Parsing is strict on purpose: SI symbols are case-sensitive ("mV" and "MV" differ by
// 10⁹), so an unknown or miscased unit is an error rather than a guess, and a value of
// the wrong dimension ("300 mA" for a voltage) is refused by ParseAs. Prefix scaling is
// done on the decimal text, not by multiplying floats, so "2 µs" is exactly the float
// nearest 2×10⁻⁶ s and Format followed by Parse gives back the same bits.
//
// The package uses only the standard library and knows nothing about microscopes
// beyond which units they need.
package quantity

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"unicode/utf8"
)

// Dimension is the physical kind of a quantity; each has one canonical SI unit.
type Dimension int

// The dimensions operating conditions use.
const (
	Voltage Dimension = iota + 1
	Current
	Angle
	Time
	Length
	Temperature
)

var dimensionInfo = map[Dimension]struct{ name, unit, example string }{
	Voltage:     {"voltage", "V", `"300 kV"`},
	Current:     {"current", "A", `"50 pA"`},
	Angle:       {"angle", "rad", `"25 mrad"`},
	Time:        {"time", "s", `"2 µs"`},
	Length:      {"length", "m", `"0.1 Å" or "80 mm"`},
	Temperature: {"temperature", "K", `"293 K" or "-180 °C"`},
}

// String names the dimension in words, for messages.
func (d Dimension) String() string {
	if i, ok := dimensionInfo[d]; ok {
		return i.name
	}
	return "Dimension(" + strconv.Itoa(int(d)) + ")"
}

// Example is a typical way of writing a value of the dimension, for messages that
// tell the user what was expected.
func (d Dimension) Example() string { return dimensionInfo[d].example }

// Unit is the canonical SI unit symbol of the dimension, the unit of every value
// Parse returns.
func (d Dimension) Unit() string { return dimensionInfo[d].unit }

// unit describes one unit symbol: SI value = (number × 10^exp10) × scale + offset.
// Powers of ten go in exp10 so that they are applied exactly, on the decimal text.
type unit struct {
	dim    Dimension
	exp10  int
	scale  float64 // 1 except for degrees of arc
	offset float64 // 0 except for degrees Celsius
	// prefixable units take the SI prefixes below; Å, ° and °C do not.
	prefixable bool
}

// units lists every symbol accepted without a prefix. Both code points people meet for
// the ångström (U+00C5, U+212B, and A with a combining ring) are accepted, as are the
// degree sign and the single-character Celsius sign.
var units = map[string]unit{
	"V":       {dim: Voltage, scale: 1, prefixable: true},
	"A":       {dim: Current, scale: 1, prefixable: true},
	"rad":     {dim: Angle, scale: 1, prefixable: true},
	"°":       {dim: Angle, scale: math.Pi / 180},
	"deg":     {dim: Angle, scale: math.Pi / 180},
	"s":       {dim: Time, scale: 1, prefixable: true},
	"m":       {dim: Length, scale: 1, prefixable: true},
	"\u00c5":  {dim: Length, exp10: -10, scale: 1},
	"\u212b":  {dim: Length, exp10: -10, scale: 1},
	"A\u030a": {dim: Length, exp10: -10, scale: 1},
	"K":       {dim: Temperature, scale: 1, prefixable: true},
	"°C":      {dim: Temperature, scale: 1, offset: 273.15},
	"\u2103":  {dim: Temperature, scale: 1, offset: 273.15},
}

// prefixes are the SI prefixes by symbol. Micro has three spellings: the micro sign
// (U+00B5), the Greek mu (U+03BC) and the ASCII "u" people type when they cannot
// reach either. Hecto and deca are left out: nobody writes "hV", and "da" would make
// "dam" ambiguous for no gain.
var prefixes = map[string]int{
	"q": -30, "r": -27, "y": -24, "z": -21, "a": -18, "f": -15, "p": -12, "n": -9,
	"\u00b5": -6, "\u03bc": -6, "u": -6, "m": -3, "c": -2, "d": -1,
	"k": 3, "M": 6, "G": 9, "T": 12, "P": 15, "E": 18, "Z": 21, "Y": 24, "R": 27, "Q": 30,
}

// prefixSymbols is the prefix each canonical exponent is written with, for FormatIn.
var prefixSymbols = map[int]string{
	-30: "q", -27: "r", -24: "y", -21: "z", -18: "a", -15: "f", -12: "p", -9: "n",
	-6: "µ", -3: "m", -2: "c", -1: "d", 0: "",
	3: "k", 6: "M", 9: "G", 12: "T", 15: "P", 18: "E", 21: "Z", 24: "Y", 27: "R", 30: "Q",
}

// Quantity is a parsed value in the canonical SI unit of its dimension.
type Quantity struct {
	SI  float64
	Dim Dimension
}

// Errors Parse wraps, so callers can tell a typo in the unit from a bad number.
var (
	ErrSyntax    = errors.New("not a \"number unit\" value")
	ErrUnit      = errors.New("unknown unit")
	ErrDimension = errors.New("wrong dimension")
	ErrRange     = errors.New("not a finite number")
)

// maxTextLen bounds the input: no honest value needs more, and it keeps exponent
// arithmetic and error messages small.
const maxTextLen = 64

// Parse reads "number unit", e.g. "300 kV" or "1.5e-3 rad", and returns it in SI. The
// space between number and unit is optional and may be a no-break space. A number
// without a unit is refused: "300" could be volts or kilovolts, and guessing is how
// units go wrong.
func Parse(text string) (Quantity, error) {
	if len(text) > maxTextLen {
		return Quantity{}, fmt.Errorf("%w: longer than %d bytes", ErrSyntax, maxTextLen)
	}
	if !utf8.ValidString(text) {
		return Quantity{}, fmt.Errorf("%w: not valid UTF-8", ErrSyntax)
	}
	s := strings.TrimSpace(text)
	num, rest, ok := splitNumber(s)
	if !ok {
		return Quantity{}, fmt.Errorf("%w: %q does not start with a decimal number (write e.g. \"300 kV\")", ErrSyntax, text)
	}
	sym := strings.TrimLeft(rest, " \u00a0\u202f\u2009")
	if sym == "" {
		return Quantity{}, fmt.Errorf("%w: %q has no unit (write e.g. \"300 kV\")", ErrSyntax, text)
	}
	u, pexp, known := lookupUnit(sym)
	if !known {
		return Quantity{}, fmt.Errorf("%w %q (units are case-sensitive: V, A, rad, °, s, m, Å, K, °C with SI prefixes)", ErrUnit, sym)
	}
	v, err := scaleDecimal(num, pexp+u.exp10)
	if err != nil {
		return Quantity{}, err
	}
	v = v*u.scale + u.offset
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return Quantity{}, fmt.Errorf("%w: %q", ErrRange, text)
	}
	if v == 0 {
		v = 0 // -0 would format as "-0" and look like a sign the user meant
	}
	return Quantity{SI: v, Dim: u.dim}, nil
}

// ParseAs is Parse that also requires dimension want, so that "300 mA" given for a
// voltage is refused with a message saying what was expected.
func ParseAs(text string, want Dimension) (float64, error) {
	q, err := Parse(text)
	if err != nil {
		return 0, err
	}
	if q.Dim != want {
		hint := ""
		if want == Length && strings.HasSuffix(strings.TrimSpace(text), "A") {
			hint = "; A is the ampere, write Å for ångström"
		}
		return 0, fmt.Errorf("%w: %q is a %s, expected a %s such as %s%s",
			ErrDimension, text, q.Dim, want, want.Example(), hint)
	}
	return q.SI, nil
}

// lookupUnit resolves a symbol, first whole (so "m" is the metre, not milli-nothing),
// then as prefix + prefixable unit.
func lookupUnit(sym string) (unit, int, bool) {
	if u, ok := units[sym]; ok {
		return u, 0, true
	}
	_, size := utf8.DecodeRuneInString(sym)
	if size == 0 || size >= len(sym) {
		return unit{}, 0, false
	}
	p, ok := prefixes[sym[:size]]
	if !ok {
		return unit{}, 0, false
	}
	u, ok := units[sym[size:]]
	if !ok || !u.prefixable {
		return unit{}, 0, false
	}
	return u, p, true
}

// splitNumber takes the longest decimal number at the start of s: an optional sign
// (the minus sign U+2212 too, as pasted from typeset text), digits with at most one
// point, and an optional exponent. Hexadecimal, "Inf", "NaN" and digit separators are
// not numbers here. The returned number is ASCII.
func splitNumber(s string) (num, rest string, ok bool) {
	var b strings.Builder
	i := 0
	switch {
	case strings.HasPrefix(s, "\u2212"):
		b.WriteByte('-')
		i = len("\u2212")
	case strings.HasPrefix(s, "-"), strings.HasPrefix(s, "+"):
		b.WriteByte(s[0])
		i = 1
	}
	digits := 0
	for ; i < len(s) && isDigit(s[i]); i++ {
		b.WriteByte(s[i])
		digits++
	}
	if i < len(s) && s[i] == '.' {
		b.WriteByte('.')
		for i++; i < len(s) && isDigit(s[i]); i++ {
			b.WriteByte(s[i])
			digits++
		}
	}
	if digits == 0 {
		return "", s, false
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		j := i + 1
		if j < len(s) && (s[j] == '+' || s[j] == '-') {
			j++
		}
		k := j
		for k < len(s) && isDigit(s[k]) {
			k++
		}
		if k > j { // an "e" with no digits after it is the start of the unit, not an exponent
			b.WriteString(s[i:k])
			i = k
		}
	}
	return b.String(), s[i:], true
}

func isDigit(c byte) bool { return '0' <= c && c <= '9' }

// scaleDecimal parses the ASCII decimal num multiplied by 10^shift, by adding shift to
// the written exponent, so the result is the float nearest the exact decimal value.
func scaleDecimal(num string, shift int) (float64, error) {
	mant, exp := num, 0
	if i := strings.IndexAny(num, "eE"); i >= 0 {
		mant = num[:i]
		e := num[i+1:]
		neg := strings.HasPrefix(e, "-")
		e = strings.TrimLeft(strings.TrimLeft(e, "+-"), "0")
		// Seven digits are past any float64 exponent; clamping keeps Atoi in range
		// while still over- or underflowing as the text says.
		if len(e) > 6 {
			e = "999999"
		}
		if e != "" {
			exp, _ = strconv.Atoi(e)
		}
		if neg {
			exp = -exp
		}
	}
	v, err := strconv.ParseFloat(mant+"e"+strconv.Itoa(exp+shift), 64)
	if err != nil || math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, fmt.Errorf("%w: %s", ErrRange, num)
	}
	return v, nil
}
