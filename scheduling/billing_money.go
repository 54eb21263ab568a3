package scheduling

import (
	"math"
	"math/bits"
	"strconv"
)

// Money is integer minor units of one currency (cents for EUR and USD, yen for JPY)
// held in int64 fields whose names end in Minor. Binary floating point never touches
// it: a rate times a duration is exact in 128 bits and rounded once.
//
// The one rounding rule for money: an amount that is not a whole number of minor units
// is rounded half up (toward +∞) to the minor unit, once per charge line, so a line's
// amount = round_half_up(minutes × hourly rate ÷ 60); CalculateRates rounds its exact
// results the same way. Splits across funding accounts never round: they apportion
// whole minor units (see SplitAmount).

// maxHourlyRateMinor bounds a rate: 10^10 minor units (a hundred million in major units)
// an hour is already a unit slip, and the bound keeps a month of lines far from int64's
// limit.
const maxHourlyRateMinor = 10_000_000_000

// maxAmountMinor bounds caps and adjustments for the same reason.
const maxAmountMinor = 1_000_000_000_000_000

// lineAmountMinor prices minutes at an hourly rate with the package's rounding rule.
// ok is false only for inputs Validate refuses (negative, or beyond int64).
func lineAmountMinor(minutes int, hourlyMinor int64) (amount int64, ok bool) {
	return mulDivHalfUp(int64(minutes), hourlyMinor, 60)
}

// mulDivHalfUp is a×b÷d rounded half up, for a, b ≥ 0 and d > 0, with the product
// held in 128 bits so that no intermediate overflows.
func mulDivHalfUp(a, b, d int64) (int64, bool) {
	q, r, ok := mulDiv(a, b, d)
	if !ok {
		return 0, false
	}
	if r >= uint64(d)-r { // 2r ≥ d without overflowing
		if q == math.MaxInt64 {
			return 0, false
		}
		q++
	}
	return q, true
}

// mulDiv is ⌊a×b÷d⌋ and the remainder, for a, b ≥ 0 and d > 0.
func mulDiv(a, b, d int64) (q int64, r uint64, ok bool) {
	if a < 0 || b < 0 || d <= 0 {
		return 0, 0, false
	}
	hi, lo := bits.Mul64(uint64(a), uint64(b))
	if hi >= uint64(d) { // the quotient would not fit in 64 bits
		return 0, 0, false
	}
	uq, ur := bits.Div64(hi, lo, uint64(d))
	if uq > math.MaxInt64 {
		return 0, 0, false
	}
	return int64(uq), ur, true
}

// apportion divides amount into whole minor units in proportion to weights: each part
// is ⌊amount × weight ÷ Σweights⌋, and the minor units those floors leave over go one
// each, in order, to the parts whose exact share had a fraction (REFERENCE §3: 100.00
// in thirds → 33.34, 33.33, 33.33). The parts always sum to amount and each lies within
// one minor unit of its exact share; a part that was exact is never rounded. A negative amount (a credit) is
// apportioned as its magnitude and negated, so a credit splits like the charge it
// offsets. ok is false when the weights are negative, sum to zero or overflow.
func apportion(amount int64, weights []int64) ([]int64, bool) {
	var total int64
	for _, w := range weights {
		if w < 0 || total > math.MaxInt64-w {
			return nil, false
		}
		total += w
	}
	if total == 0 || amount == math.MinInt64 {
		return nil, false
	}
	sign, mag := int64(1), amount
	if amount < 0 {
		sign, mag = -1, -amount
	}
	parts := make([]int64, len(weights))
	inexact := make([]bool, len(weights))
	left := mag
	for i, w := range weights {
		q, r, ok := mulDiv(mag, w, total)
		if !ok {
			return nil, false
		}
		parts[i], inexact[i] = q, r > 0
		left -= q
	}
	// The fractions dropped sum to left, each under one unit, so more than left parts
	// have one: every leftover unit finds a part whose exact share it belongs to.
	for i := 0; left > 0 && i < len(weights); i++ {
		if inexact[i] {
			parts[i]++
			left--
		}
	}
	for i := range parts {
		parts[i] *= sign
	}
	return parts, true
}

// addMinor adds money, refusing to wrap around.
func addMinor(a, b int64) (int64, bool) {
	s := a + b
	if (b > 0 && s < a) || (b < 0 && s > a) {
		return 0, false
	}
	return s, true
}

// minorDigits is how many decimal places an ISO 4217 currency's minor unit has. The
// currencies listed differ from the usual two; an unknown code is read as two, which is
// right for nearly every currency in use.
func minorDigits(currency string) int {
	switch currency {
	case "BIF", "CLP", "DJF", "GNF", "ISK", "JPY", "KMF", "KRW", "PYG", "RWF",
		"UGX", "UYI", "VND", "VUV", "XAF", "XOF", "XPF":
		return 0
	case "BHD", "IQD", "JOD", "KWD", "LYD", "OMR", "TND":
		return 3
	case "CLF", "UYW":
		return 4
	}
	return 2
}

// FormatMinor writes an amount in minor units as a decimal in the currency's major
// unit, such as 36000 EUR → "360.00" and -5 EUR → "-0.05", for people and finance
// systems that read major units. The conversion is on decimal digits, never floats.
func FormatMinor(amountMinor int64, currency string) string {
	digits := minorDigits(currency)
	neg := amountMinor < 0
	s := strconv.FormatUint(absMinor(amountMinor), 10)
	if digits > 0 {
		for len(s) <= digits {
			s = "0" + s
		}
		s = s[:len(s)-digits] + "." + s[len(s)-digits:]
	}
	if neg {
		s = "-" + s
	}
	return s
}

// absMinor is |a| as unsigned, defined for math.MinInt64 too.
func absMinor(a int64) uint64 {
	if a < 0 {
		return uint64(-(a + 1)) + 1
	}
	return uint64(a)
}
