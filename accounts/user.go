package accounts

import (
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
)

// User is a person who signs in. The password hash never leaves storage and this package.
type User struct {
	ID          string    `json:"id"`
	Email       string    `json:"email"`
	DisplayName string    `json:"display_name"`
	ORCID       string    `json:"orcid,omitempty"`
	Role        Role      `json:"role"`
	Disabled    bool      `json:"disabled"`
	CreatedAt   time.Time `json:"created_at"`
	UpdatedAt   time.Time `json:"updated_at"`
}

// NewUser is the input for creating a user.
type NewUser struct {
	Email       string `json:"email"`
	DisplayName string `json:"display_name"`
	ORCID       string `json:"orcid"`
	Role        Role   `json:"role"`
	Password    string `json:"password"`
}

// Normalize canonicalises and checks the input in place, naming every bad field.
// minPasswordLen is MinPasswordLength outside demo mode.
func (n *NewUser) Normalize(minPasswordLen int) error {
	fe := beamledger.FieldErrors{}
	if email, err := NormalizeEmail(n.Email); err != nil {
		fe.Add("email", beamledger.FieldReason(err))
	} else {
		n.Email = email
	}
	n.DisplayName = strings.TrimSpace(n.DisplayName)
	if reason := checkName(n.DisplayName, 200); reason != "" {
		fe.Add("display_name", reason)
	}
	if n.ORCID != "" {
		if id, err := ParseORCID(n.ORCID); err != nil {
			fe.Add("orcid", beamledger.FieldReason(err))
		} else {
			n.ORCID = id
		}
	}
	if !n.Role.Valid() {
		fe.Add("role", "must be one of manager, staff, researcher, auditor")
	}
	if err := CheckPasswordPolicy(n.Password, minPasswordLen); err != nil {
		fe.Add("password", beamledger.FieldReason(err))
	}
	return fe.Err()
}

// UserPatch changes some fields of a user; nil means unchanged. ORCID "" clears it.
type UserPatch struct {
	DisplayName *string `json:"display_name"`
	ORCID       *string `json:"orcid"`
	Role        *Role   `json:"role"`
	Disabled    *bool   `json:"disabled"`
}

// Normalize canonicalises and checks the patch in place.
func (p *UserPatch) Normalize() error {
	fe := beamledger.FieldErrors{}
	if p.DisplayName != nil {
		s := strings.TrimSpace(*p.DisplayName)
		p.DisplayName = &s
		if reason := checkName(s, 200); reason != "" {
			fe.Add("display_name", reason)
		}
	}
	if p.ORCID != nil && strings.TrimSpace(*p.ORCID) != "" {
		if id, err := ParseORCID(*p.ORCID); err != nil {
			fe.Add("orcid", beamledger.FieldReason(err))
		} else {
			p.ORCID = &id
		}
	} else if p.ORCID != nil {
		empty := ""
		p.ORCID = &empty
	}
	if p.Role != nil && !p.Role.Valid() {
		fe.Add("role", "must be one of manager, staff, researcher, auditor")
	}
	return fe.Err()
}

// Empty reports whether the patch changes nothing.
func (p UserPatch) Empty() bool {
	return p.DisplayName == nil && p.ORCID == nil && p.Role == nil && p.Disabled == nil
}

// Credentials is what login needs about a user.
type Credentials struct {
	User         User
	PasswordHash string // PHC string; "" when the user has no password
}

func checkName(s string, max int) string {
	switch {
	case s == "":
		return "is required"
	case utf8.RuneCountInString(s) > max:
		return "is too long"
	case strings.ContainsAny(s, "\x00\r\n"):
		return "must be one line of text"
	}
	return ""
}
