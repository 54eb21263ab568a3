package accounts

import (
	"errors"
	"strings"
	"testing"

	"beamledger"
)

func TestNormalizeEmail(t *testing.T) {
	// 64-byte local part + "@" + 189-byte domain = 254 bytes, the longest accepted.
	longest := strings.Repeat("a", 64) + "@" + strings.Repeat("b", 185) + ".org"
	cases := map[string]string{
		"ann.lee@example.org":             "ann.lee@example.org",
		"Ann.Lee@Example.ORG":             "ann.lee@example.org",
		"  ann@example.org \t\n":          "ann@example.org",
		"a+em-facility@sub.example.ac.uk": "a+em-facility@sub.example.ac.uk",
		"root@localhost":                  "root@localhost", // a domain without a dot is fine
		"Ünïcode@Exämple.org":             "ünïcode@exämple.org",
		strings.ToUpper(longest):          longest,
	}
	for in, want := range cases {
		if got, err := NormalizeEmail(in); err != nil || got != want {
			t.Errorf("NormalizeEmail(%q) = %q, %v; want %q", in, got, err, want)
		}
	}
}

func TestNormalizeEmailRejects(t *testing.T) {
	for _, in := range []string{
		"",
		"  ",
		"Ann <ann@example.org>",
		"<ann@example.org>",
		"ann@example.org (Ann)",
		`"ann lee"@example.org`,
		"ann@example.org, bob@example.org",
		"ann",
		"@example.org",
		"ann@",
		"ann@@example.org",
		"ann lee@example.org",
		"ann@exa mple.org",
		"ann@example.org.",
		"ann..lee@example.org",
		"ann@[192.0.2.1]",
		"ann\x00@example.org",
		strings.Repeat("a", 65) + "@example.org", // local part over 64 bytes
		strings.Repeat("a", 64) + "@" + strings.Repeat("b", 186) + ".org", // 255 bytes
		strings.Repeat("a", 10000) + "@example.org",
	} {
		got, err := NormalizeEmail(in)
		var e *beamledger.Error
		if !errors.Is(err, beamledger.ErrInvalid) || !errors.As(err, &e) || e.Fields["email"] == "" {
			t.Errorf("NormalizeEmail(%q) = %q, %v; want an Invalid error naming email", in, got, err)
		}
	}
}
