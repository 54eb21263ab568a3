package provenance

import (
	"math"
	"regexp"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
	"beamledger/accounts"
)

// Specimen is a sample belonging to a project. Its fluence budget (electrons per square
// ångström) is how much beam the sample tolerates before it is damaged; acquisitions
// that take it past the budget are accepted with a warning, since the data may still
// be wanted, and the warning travels with them.
type Specimen struct {
	ID          string `json:"id"`
	ProjectID   string `json:"project_id"`
	Code        string `json:"code"`
	Description string `json:"description"`
	// FluenceBudgetEPerA2 is absent when the specimen has no budget.
	FluenceBudgetEPerA2 *float64 `json:"fluence_budget_e_per_angstrom2,omitempty"`
	// FluenceUsedEPerA2 sums the fluence of the newest version of every acquisition
	// on the specimen (each acquisition counted once, as corrected).
	FluenceUsedEPerA2 float64   `json:"fluence_used_e_per_angstrom2"`
	Acquisitions      int       `json:"acquisitions"`
	CreatedBy         string    `json:"created_by"`
	CreatedAt         time.Time `json:"created_at"`
}

// OverBudget reports whether the specimen's used fluence exceeds its budget.
func (s Specimen) OverBudget() bool {
	return s.FluenceBudgetEPerA2 != nil && s.FluenceUsedEPerA2 > *s.FluenceBudgetEPerA2
}

// NewSpecimen is the input for registering a specimen.
type NewSpecimen struct {
	ProjectID           string   `json:"project_id"`
	Code                string   `json:"code"`
	Description         string   `json:"description"`
	FluenceBudgetEPerA2 *float64 `json:"fluence_budget_e_per_angstrom2"`
	CreatedBy           string   `json:"-"`
}

var specimenCode = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$`)

// maxFluenceBudget bounds a budget at 10⁹ e⁻/Å²: radiation-hard crystals imaged for
// hours reach about 10⁸, so anything larger is a unit slip (nm² for Å², or a count).
const maxFluenceBudget = 1e9

// Normalize canonicalises and checks the input in place.
func (n *NewSpecimen) Normalize() error {
	fe := beamledger.FieldErrors{}
	if !accounts.ValidID(n.ProjectID) {
		fe.Add("project_id", "must be a project id")
	}
	n.Code = strings.TrimSpace(n.Code)
	if !specimenCode.MatchString(n.Code) {
		fe.Add("code", "must be 1-64 characters of letters, digits, '.', '_' and '-', starting with a letter or digit")
	}
	n.Description = strings.TrimSpace(n.Description)
	if utf8.RuneCountInString(n.Description) > 2000 {
		fe.Add("description", "is too long (at most 2000 characters)")
	}
	if b := n.FluenceBudgetEPerA2; b != nil && (math.IsNaN(*b) || *b <= 0 || *b > maxFluenceBudget) {
		fe.Add("fluence_budget_e_per_angstrom2", "must be a number of electrons per square ångström above 0 and at most 1e9")
	}
	return fe.Err()
}

// SpecimenFilter selects specimens; empty fields select everything.
type SpecimenFilter struct {
	ProjectID string
	// ProjectIDs limits the listing to these projects when not nil (a researcher's own).
	ProjectIDs []string
}
