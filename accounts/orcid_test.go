package accounts

import (
	"errors"
	"testing"

	"beamledger"
)

// Published example iDs. [published: ORCID support, "Structure of the ORCID Identifier" — memory]
var publishedORCIDs = []string{"0000-0002-1825-0097", "0000-0001-5109-3700", "0000-0002-1694-233X"}

func TestParseORCIDPublished(t *testing.T) {
	for _, id := range publishedORCIDs {
		// [published: ORCID support, "Structure of the ORCID Identifier" — memory]
		if got, err := ParseORCID(id); err != nil || got != id {
			t.Errorf("ParseORCID(%q) = %q, %v; want it back unchanged", id, got, err)
		}
	}
}

func TestParseORCIDForms(t *testing.T) {
	cases := map[string]string{
		"https://orcid.org/0000-0002-1825-0097":   "0000-0002-1825-0097",
		"http://orcid.org/0000-0002-1825-0097":    "0000-0002-1825-0097",
		"orcid.org/0000-0002-1825-0097":           "0000-0002-1825-0097",
		"HTTPS://ORCID.ORG/0000-0002-1825-0097":   "0000-0002-1825-0097",
		"  0000-0001-5109-3700\t\n":               "0000-0001-5109-3700",
		" https://orcid.org/0000-0002-1694-233X ": "0000-0002-1694-233X",
		// A lowercase x is accepted and written in upper case.
		"0000-0002-1694-233x":                   "0000-0002-1694-233X",
		"https://orcid.org/0000-0002-1694-233x": "0000-0002-1694-233X",
	}
	for in, want := range cases {
		if got, err := ParseORCID(in); err != nil || got != want {
			t.Errorf("ParseORCID(%q) = %q, %v; want %q", in, got, err, want)
		}
	}
}

func TestParseORCIDRejects(t *testing.T) {
	for _, in := range []string{
		"",
		"   ",
		"0000-0002-1825-0098",  // wrong check digit
		"0000-0002-1694-2330",  // check character is X, not 0
		"0000-0001-5109-370X",  // check character is 0, not X
		"0000-0002-1825-009",   // one digit short
		"0000-0002-1825-00970", // one digit long
		"0000000218250097",     // no hyphens
		"00000-002-1825-0097",  // hyphen misplaced
		"0000-0002-1825_0097",
		"0000-000A-1825-0097", // letter
		"000X-0002-1825-0097", // X only as the check character
		"0000-0002-1825-009Y",
		"０000-0002-1825-0097", // fullwidth digit
		"https://orcid.org/",
		"https://example.org/0000-0002-1825-0097",
		"https://orcid.org/0000-0002-1825-0097/",
		"orcid:0000-0002-1825-0097",
	} {
		got, err := ParseORCID(in)
		var e *beamledger.Error
		if !errors.Is(err, beamledger.ErrInvalid) || !errors.As(err, &e) || e.Fields["orcid"] == "" {
			t.Errorf("ParseORCID(%q) = %q, %v; want an Invalid error naming orcid", in, got, err)
		}
	}
}

// MOD 11-2 weights the characters by powers of 2 modulo 11, all non-zero, and 11 is
// prime, so changing one character or swapping two unequal neighbours always changes
// the sum. [computed: from the ISO 7064 MOD 11-2 definition] Checking every such
// change of the published iDs exercises the check far beyond three examples.
func TestParseORCIDDetectsTypos(t *testing.T) {
	positions := []int{0, 1, 2, 3, 5, 6, 7, 8, 10, 11, 12, 13, 15, 16, 17, 18}
	for _, id := range publishedORCIDs {
		for _, i := range positions {
			for _, c := range "0123456789X" {
				if byte(c) == id[i] || (c == 'X' && i != 18) {
					continue
				}
				typo := id[:i] + string(c) + id[i+1:]
				if _, err := ParseORCID(typo); err == nil {
					t.Errorf("ParseORCID(%q) accepted a one-character typo of %s", typo, id)
				}
			}
		}
		for k := 0; k+1 < len(positions); k++ {
			i, j := positions[k], positions[k+1]
			if id[i] == id[j] {
				continue
			}
			b := []byte(id)
			b[i], b[j] = b[j], b[i]
			if _, err := ParseORCID(string(b)); err == nil {
				t.Errorf("ParseORCID(%q) accepted a swap of neighbours in %s", b, id)
			}
		}
	}
}
