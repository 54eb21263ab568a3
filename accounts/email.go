package accounts

import (
	"net/mail"
	"strings"

	"beamledger"
)

// Size limits of RFC 5321 §4.5.3.1: a forward path holds at most 256 octets
// including its angle brackets, leaving 254 for the address, and a local part at
// most 64. An address beyond them cannot receive mail.
const (
	maxEmailBytes     = 254
	maxEmailLocalPart = 64
)

// NormalizeEmail returns the canonical form of a sign-in address: trimmed and
// lowercased as a whole. Lowercasing makes uniqueness case-insensitive, so
// Ann@Example.org and ann@example.org cannot become two accounts. RFC 5321 lets a
// server treat the local part case-sensitively, but mail systems in practice do not,
// and two accounts differing only in case would be a mistake, not two people.
//
// Only a single bare address (local@domain) is accepted. Display names, angle
// brackets, comments, quoted local parts and domain literals are legal in a mail
// header but refused here: a stored address must have one spelling, the one a
// person types into the sign-in form, and such forms in that field are nearly
// always a paste from a mail client rather than an intended address.
func NormalizeEmail(s string) (string, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return "", beamledger.InvalidField("email", "is required")
	}
	if len(s) > maxEmailBytes {
		return "", beamledger.InvalidField("email", "must be at most 254 bytes")
	}
	const shape = "must be a single address like name@example.org"
	addr, err := mail.ParseAddress(s)
	// net/mail also accepts "Ann <a@b.c>" and "a@b.c (Ann)"; a parse that does not
	// give back the input unchanged had something around or inside the address.
	if err != nil || addr.Name != "" || addr.Address != s {
		return "", beamledger.InvalidField("email", shape)
	}
	at := strings.LastIndexByte(s, '@')
	local, domain := s[:at], s[at+1:]
	switch {
	case local == "" || domain == "" || strings.HasPrefix(domain, "["):
		return "", beamledger.InvalidField("email", shape)
	case len(local) > maxEmailLocalPart:
		return "", beamledger.InvalidField("email", "the part before @ must be at most 64 bytes")
	}
	lower := strings.ToLower(s)
	// A few characters grow when lowercased (İ becomes i̇), so check again.
	if len(lower) > maxEmailBytes {
		return "", beamledger.InvalidField("email", "must be at most 254 bytes")
	}
	return lower, nil
}
