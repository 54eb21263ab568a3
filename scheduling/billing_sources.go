package scheduling

import (
	"errors"
	"fmt"
	"slices"
	"strings"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// BillableBooking is one booking of a project as storage reads it for a statement:
// the booking, its usage, and what happened to it.
type BillableBooking struct {
	Booking Booking `json:"booking"`
	Usages  []Usage `json:"usages"`
	NoShow  bool    `json:"no_show"`
	// DisplacedByService is set when a service booking cancelled it.
	DisplacedByService bool `json:"displaced_by_service"`
	// RebookedMinutes is how much of a cancelled booking's range others booked after
	// it was cancelled.
	RebookedMinutes int `json:"rebooked_minutes"`
	// Funding is the booking's own split; empty when it has none.
	Funding []FundingShare `json:"funding"`
}

// StatementSources is everything a project's statement for one period is priced from.
type StatementSources struct {
	StatementID string
	ProjectID   string
	RateClass   accounts.RateClass
	Currency    string
	PeriodStart time.Time
	PeriodEnd   time.Time
	Now         time.Time // open usages run to now
	Bookings    []BillableBooking
	Schedules   []RateSchedule
	// Facility is the facility's policy; Overrides holds instruments' departures.
	Facility  BillingPolicy
	Overrides map[string]BillingPolicyOverride
	// ProjectFunding is the project's default split, for bookings with none of their own.
	ProjectFunding []FundingShare
	Adjustments    []Adjustment
	// AccountClasses holds the rate class of each funding account that carries its own
	// (FundingAccount.RateClass); the others' shares are priced at RateClass.
	AccountClasses map[string]accounts.RateClass
}

// classGroup is the accounts of a split whose shares are priced at one rate class.
type classGroup struct {
	class    accounts.RateClass
	accounts []string
}

// classGroups groups a split's accounts by the rate class their shares are priced at,
// classes in the order their first account appears in the split. A split whose shares
// are all priced at one class is one group with accounts nil (all of them).
func classGroups(split []FundingShare, own map[string]accounts.RateClass, project accounts.RateClass) []classGroup {
	if len(own) == 0 {
		return []classGroup{{class: project}}
	}
	var groups []classGroup
	for _, sh := range split {
		c, ok := own[sh.AccountID]
		if !ok {
			c = project
		}
		i := slices.IndexFunc(groups, func(g classGroup) bool { return g.class == c })
		if i < 0 {
			groups, i = append(groups, classGroup{class: c}), len(groups)
		}
		groups[i].accounts = append(groups[i].accounts, sh.AccountID)
	}
	switch len(groups) {
	case 0:
		return []classGroup{{class: project}}
	case 1:
		return []classGroup{{class: groups[0].class}}
	}
	return groups
}

// FundingFor is the split a booking's charges go to: its own, else the project's
// default. It is nil when there is neither.
func FundingFor(own, project []FundingShare) []FundingShare {
	if len(own) > 0 {
		return own
	}
	return project
}

// PriceStatement prices every booking under the policy in force on its instrument and
// gathers the lines, the funding and the adjustments into the input of
// AssembleStatement. Bookings that charge nothing are left out.
//
// Errors: those of ComputeCharges, and ErrInvalid naming "funding" (with the booking)
// when a booking that is charged has no split to post to.
func PriceStatement(src StatementSources) (StatementInput, error) {
	in := StatementInput{ID: src.StatementID, ProjectID: src.ProjectID, Currency: src.Currency,
		PeriodStart: src.PeriodStart, PeriodEnd: src.PeriodEnd, Adjustments: src.Adjustments,
		MonthlyCapMinor: src.Facility.MonthlyCapMinor}
	// Each instrument's policy and schedules, found once rather than per booking (a
	// month of a busy facility is tens of thousands of bookings on a few instruments).
	type instrumentTerms struct {
		policy    BillingPolicy
		schedules []RateSchedule
	}
	terms := map[string]*instrumentTerms{}
	sc := new(chargeScratch)
	if len(src.Bookings) > 0 {
		in.Charges = make([]BookingCharges, 0, len(src.Bookings))
	}
	for _, bb := range src.Bookings {
		t := terms[bb.Booking.InstrumentID]
		if t == nil {
			t = &instrumentTerms{policy: src.Facility.With(src.Overrides[bb.Booking.InstrumentID])}
			for _, rs := range src.Schedules {
				if rs.InstrumentID == bb.Booking.InstrumentID {
					t.schedules = append(t.schedules, rs)
				}
			}
			terms[bb.Booking.InstrumentID] = t
		}
		funding := FundingFor(bb.Funding, src.ProjectFunding)
		groups := classGroups(funding, src.AccountClasses, src.RateClass)
		for _, g := range groups {
			lines, err := computeCharges(sc, ChargeInput{Booking: bb.Booking, RateClass: g.class, Usages: bb.Usages,
				RebookedMinutes: bb.RebookedMinutes, NoShow: bb.NoShow, DisplacedByService: bb.DisplacedByService, Now: src.Now},
				t.schedules, t.policy)
			if err != nil {
				return StatementInput{}, fmt.Errorf("booking %s: %w", bb.Booking.ID, err)
			}
			if len(lines) == 0 {
				continue
			}
			if len(funding) == 0 {
				return StatementInput{}, beamledger.InvalidField("funding",
					fmt.Sprintf("booking %s is charged but neither it nor its project has a funding split", bb.Booking.ID))
			}
			b := bb.Booking
			bc := BookingCharges{BookingID: b.ID, InstrumentID: b.InstrumentID, Kind: b.Kind, Start: b.Start, Lines: lines, Funding: funding}
			if len(groups) > 1 {
				bc.Accounts, bc.RateClass = g.accounts, g.class
			}
			in.Charges = append(in.Charges, bc)
		}
	}
	return in, nil
}

// CheckFundingAt refuses, as RuleViolation "funding_account" naming "funding", a
// booking of [start, end) whose charges would go to an account not valid over all of
// it: one not yet valid at the start, or expired before the end. Accounts not in the
// split are not looked at; an account of the split missing from accounts is refused.
func CheckFundingAt(split []FundingShare, accounts []FundingAccount, start, end time.Time) error {
	for _, sh := range split {
		var acct *FundingAccount
		for i := range accounts {
			if accounts[i].ID == sh.AccountID {
				acct = &accounts[i]
			}
		}
		if acct == nil {
			return beamledger.InvalidField("funding", "names funding account "+sh.AccountID+", which is not the project's")
		}
		if acct.ValidFrom != nil && start.Before(*acct.ValidFrom) {
			return beamledger.RuleViolation("funding_account", "funding account "+acct.Code+" may not be charged before "+
				acct.ValidFrom.UTC().Format(time.RFC3339), map[string]string{"funding": "account " + acct.Code + " is not valid yet at the booking's start"})
		}
		if acct.ValidUntil != nil && end.After(*acct.ValidUntil) {
			return beamledger.RuleViolation("funding_account", "funding account "+acct.Code+" expires at "+
				acct.ValidUntil.UTC().Format(time.RFC3339)+", before the booking ends", map[string]string{"funding": "account " + acct.Code + " has expired by the booking's end"})
		}
	}
	return nil
}

// Validate checks an adjustment as a statement will, naming fields by their JSON names.
func (a Adjustment) Validate() error {
	fe := beamledger.FieldErrors{}
	if r := strings.TrimSpace(a.Reason); r == "" || len(r) > 1000 {
		fe.Add("reason", "is required (at most 1000 characters): a project must be able to see why")
	}
	if a.AmountMinor == 0 || a.AmountMinor < -maxAmountMinor || a.AmountMinor > maxAmountMinor {
		fe.Add("amount_minor", fmt.Sprintf("must be non-zero and within ±%d (negative for a credit)", int64(maxAmountMinor)))
	}
	if err := ValidateShares(a.Funding); err != nil {
		var e *beamledger.Error
		if errors.As(err, &e) {
			for k, v := range e.Fields {
				fe.Add(k, v)
			}
		}
	}
	return fe.Err()
}
