package accounts

import (
	"strings"

	"beamledger"
)

// orcidURLPrefixes are the forms in which people paste an ORCID iD besides the bare
// identifier, longest first so that a shorter one cannot match a longer one's tail.
var orcidURLPrefixes = []string{"https://orcid.org/", "http://orcid.org/", "orcid.org/"}

// ParseORCID accepts an ORCID iD as the bare identifier (0000-0002-1825-0097) or as
// its URL (https://, http:// or without a scheme), with surrounding spaces, and
// returns the canonical hyphenated form: sixteen characters in groups of four, with
// an uppercase X as the check character when it is ten. The check character is
// verified with ISO 7064 MOD 11-2, which catches every single mistyped character and
// every swap of two neighbouring ones, the usual ways a pasted or retyped iD goes wrong.
//
// The sixteen characters without hyphens are refused: the hyphenated form is what
// ORCID displays everywhere, so anything else has more likely lost characters.
func ParseORCID(s string) (string, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return "", beamledger.InvalidField("orcid", "is required")
	}
	// The scheme and host are case-insensitive in a URL.
	for _, p := range orcidURLPrefixes {
		if len(s) >= len(p) && strings.EqualFold(s[:len(p)], p) {
			s = s[len(p):]
			break
		}
	}
	const shape = "must look like 0000-0002-1825-0097"
	if len(s) != 19 {
		return "", beamledger.InvalidField("orcid", shape)
	}
	digits := make([]byte, 0, 16)
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case i%5 == 4:
			if c != '-' {
				return "", beamledger.InvalidField("orcid", shape)
			}
			continue
		case c >= '0' && c <= '9':
		case i == len(s)-1 && (c == 'X' || c == 'x'):
			c = 'X'
		default:
			return "", beamledger.InvalidField("orcid", shape)
		}
		digits = append(digits, c)
	}
	if orcidCheckChar(digits[:15]) != digits[15] {
		return "", beamledger.InvalidField("orcid", "check character does not match; the iD has a typing error")
	}
	return string(digits[0:4]) + "-" + string(digits[4:8]) + "-" + string(digits[8:12]) + "-" + string(digits[12:16]), nil
}

// orcidCheckChar computes the ISO 7064 MOD 11-2 check character of base, which must
// be ASCII digits: double-and-add over the digits, then the complement modulo 11,
// written as X when it is 10.
func orcidCheckChar(base []byte) byte {
	total := 0
	for _, c := range base {
		total = (total + int(c-'0')) * 2
	}
	result := (12 - total%11) % 11
	if result == 10 {
		return 'X'
	}
	return byte('0' + result)
}
