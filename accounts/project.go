package accounts

import (
	"regexp"
	"slices"
	"strings"
	"time"

	"beamledger"
)

// RateClass decides which rate schedule a project's bookings are charged at.
type RateClass string

// The rate classes, from the glossary.
const (
	RateInternal         RateClass = "internal"
	RateExternalAcademic RateClass = "external_academic"
	RateCommercial       RateClass = "commercial"
)

// RateClasses lists every rate class.
var RateClasses = []RateClass{RateInternal, RateExternalAcademic, RateCommercial}

// Valid reports whether c is one of RateClasses.
func (c RateClass) Valid() bool { return slices.Contains(RateClasses, c) }

// Project is a body of work with a principal investigator and members; bookings and
// acquisitions belong to a project.
type Project struct {
	ID                      string    `json:"id"`
	Code                    string    `json:"code"`
	Title                   string    `json:"title"`
	PrincipalInvestigatorID string    `json:"principal_investigator_id"`
	RateClass               RateClass `json:"rate_class"`
	MemberIDs               []string  `json:"member_ids"`
	CreatedAt               time.Time `json:"created_at"`
	UpdatedAt               time.Time `json:"updated_at"`
}

// HasMember reports whether userID is a member (the principal investigator always is).
func (p Project) HasMember(userID string) bool {
	return p.PrincipalInvestigatorID == userID || slices.Contains(p.MemberIDs, userID)
}

var projectCode = regexp.MustCompile(`^[A-Z0-9][A-Z0-9-]{1,31}$`)

// NewProject is the input for creating a project.
type NewProject struct {
	Code                    string    `json:"code"`
	Title                   string    `json:"title"`
	PrincipalInvestigatorID string    `json:"principal_investigator_id"`
	RateClass               RateClass `json:"rate_class"`
}

// Normalize canonicalises and checks the input in place.
func (n *NewProject) Normalize() error {
	fe := beamledger.FieldErrors{}
	n.Code = strings.ToUpper(strings.TrimSpace(n.Code))
	if !projectCode.MatchString(n.Code) {
		fe.Add("code", "must be 2-32 characters of A-Z, 0-9 and '-', starting with a letter or digit")
	}
	n.Title = strings.TrimSpace(n.Title)
	if reason := checkName(n.Title, 300); reason != "" {
		fe.Add("title", reason)
	}
	if !ValidID(n.PrincipalInvestigatorID) {
		fe.Add("principal_investigator_id", "must be a user id")
	}
	if !n.RateClass.Valid() {
		fe.Add("rate_class", "must be one of internal, external_academic, commercial")
	}
	return fe.Err()
}

// ProjectPatch changes some fields of a project; nil means unchanged.
type ProjectPatch struct {
	Title                   *string    `json:"title"`
	PrincipalInvestigatorID *string    `json:"principal_investigator_id"`
	RateClass               *RateClass `json:"rate_class"`
}

// Normalize canonicalises and checks the patch in place; an empty patch is an error.
func (p *ProjectPatch) Normalize() error {
	if p.Title == nil && p.PrincipalInvestigatorID == nil && p.RateClass == nil {
		return beamledger.Invalid("nothing to change: send at least one of title, principal_investigator_id, rate_class", nil)
	}
	fe := beamledger.FieldErrors{}
	if p.Title != nil {
		s := strings.TrimSpace(*p.Title)
		p.Title = &s
		if reason := checkName(s, 300); reason != "" {
			fe.Add("title", reason)
		}
	}
	if p.PrincipalInvestigatorID != nil && !ValidID(*p.PrincipalInvestigatorID) {
		fe.Add("principal_investigator_id", "must be a user id")
	}
	if p.RateClass != nil && !p.RateClass.Valid() {
		fe.Add("rate_class", "must be one of internal, external_academic, commercial")
	}
	return fe.Err()
}

var uuidPattern = regexp.MustCompile(`^[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}$`)

// ValidID reports whether s has the shape of an object id (a lower-case UUID), so that
// a malformed id is a 400 naming the field, not a database error.
func ValidID(s string) bool { return uuidPattern.MatchString(s) }
