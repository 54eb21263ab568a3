package scheduling

import (
	"fmt"
	"slices"

	"beamledger"
	"beamledger/accounts"
)

// EstimatePricing is what a booking's charges are estimated from before it happens:
// the project's rate class, the schedules and the policy in force on its instrument.
type EstimatePricing struct {
	ProjectClass accounts.RateClass
	Schedules    []RateSchedule
	Policy       BillingPolicy
}

// accountClass is the rate class an account's share of a charge is priced at: the
// account's own when it has one, else the project's.
func accountClass(a *FundingAccount, project accounts.RateClass) accounts.RateClass {
	if a.RateClass != "" {
		return a.RateClass
	}
	return project
}

// EstimateShares estimates what a booking will post to each funding account of its
// split: its booked time priced as ComputeCharges would price a booking that went
// ahead exactly as booked (the policy's increments, minimum, unattended cap and staff
// time, at the schedules in force over the range), split by the shares with the
// remainder to the accounts in order. Accounts missing from accounts are priced at the
// project's class. Errors are ComputeCharges', such as "rate_schedule_in_force".
func EstimateShares(b Booking, split []FundingShare, accts []FundingAccount, pr EstimatePricing) (map[string]int64, error) {
	p := pr.Policy
	p.Basis = BasisBooked
	b.Status, b.CancelledAt = StatusActive, nil
	return estimateShares(ChargeInput{Booking: b}, split, accts, pr.ProjectClass, pr.Schedules, p)
}

// EstimateCancelledShares estimates what a cancelled booking will still post to each
// funding account of its split: its late-cancellation charge, as ComputeCharges prices
// it (booked time less rebookedMinutes others booked since, nothing when it was
// cancelled in time or displaced by service under a policy that does not charge
// that), split as EstimateShares splits.
func EstimateCancelledShares(b Booking, rebookedMinutes int, displacedByService bool, split []FundingShare, accts []FundingAccount,
	pr EstimatePricing) (map[string]int64, error) {
	if b.Status != StatusCancelled || b.CancelledAt == nil {
		return nil, beamledger.InvalidField("status", "only a cancelled booking has a cancellation charge")
	}
	in := ChargeInput{Booking: b, RebookedMinutes: rebookedMinutes, DisplacedByService: displacedByService}
	return estimateShares(in, split, accts, pr.ProjectClass, pr.Schedules, pr.Policy)
}

// estimateShares prices in at each rate class the split's accounts take and returns
// each account's share.
func estimateShares(in ChargeInput, split []FundingShare, accts []FundingAccount, project accounts.RateClass,
	schedules []RateSchedule, p BillingPolicy) (map[string]int64, error) {
	out := make(map[string]int64, len(split))
	if in.Booking.Kind == KindService || len(split) == 0 {
		return out, nil
	}
	classOf := func(id string) accounts.RateClass {
		i := slices.IndexFunc(accts, func(a FundingAccount) bool { return a.ID == id })
		if i < 0 {
			return project
		}
		return accountClass(&accts[i], project)
	}
	priced := map[accounts.RateClass][]Allocation{}
	for _, sh := range split {
		class := classOf(sh.AccountID)
		allocs, ok := priced[class]
		if !ok {
			in.RateClass = class
			lines, err := ComputeCharges(in, schedules, p)
			if err != nil {
				return nil, err
			}
			if allocs, err = SplitAmount(sumLines(lines), split); err != nil {
				return nil, err
			}
			priced[class] = allocs
		}
		for _, a := range allocs {
			if a.AccountID == sh.AccountID {
				out[sh.AccountID] = a.AmountMinor
			}
		}
	}
	return out, nil
}

// FundingCapCheck is what CheckFundingCaps judges a new or moved booking by.
type FundingCapCheck struct {
	Booking Booking
	// Previous is the booking as it stood before a move or extension; nil for a new one.
	Previous *Booking
	// Split is the booking's funding split; Accounts holds every account of it.
	Split    []FundingShare
	Accounts []FundingAccount
	Pricing  EstimatePricing
	// UsedMinor is, per account, what is already charged to it (issued statements)
	// plus what is committed to it (the estimates of the project's other active
	// bookings not yet on an issued statement), this booking left out.
	UsedMinor map[string]int64
}

// CheckFundingCaps refuses, as RuleViolation "funding_cap" naming "funding", a booking
// whose estimated share (EstimateShares) would take a capped account's charged plus
// committed total past its cap. A move or extension is refused only on an account it
// adds cost to, so moving a booking on an account already over its cap (whose cap was
// lowered, say) is never refused for costing no more than before. Accounts without a
// cap are not looked at, and nothing is priced when the split has none.
func CheckFundingCaps(c FundingCapCheck) error {
	capped := map[string]FundingAccount{}
	for _, a := range c.Accounts {
		if a.CapMinor > 0 && slices.ContainsFunc(c.Split, func(s FundingShare) bool { return s.AccountID == a.ID }) {
			capped[a.ID] = a
		}
	}
	if len(capped) == 0 {
		return nil
	}
	est, err := EstimateShares(c.Booking, c.Split, c.Accounts, c.Pricing)
	if err != nil {
		return err
	}
	var before map[string]int64
	if c.Previous != nil {
		if before, err = EstimateShares(*c.Previous, c.Split, c.Accounts, c.Pricing); err != nil {
			before = nil // the booking could not be priced before: all of it is new cost
		}
	}
	for _, sh := range c.Split { // in the split's order, so the first account to pass is named
		id := sh.AccountID
		a, ok := capped[id]
		if !ok {
			continue
		}
		add := est[id]
		if before != nil && add <= before[id] {
			continue
		}
		if used := c.UsedMinor[id]; used+add > a.CapMinor {
			return beamledger.RuleViolation("funding_cap", fmt.Sprintf(
				"funding account %s has a cap of %d minor units with %d charged and committed; this booking's estimated share of %d would pass it",
				a.Code, a.CapMinor, used, add), map[string]string{"funding": "account " + a.Code + " would pass its cap"})
		}
	}
	return nil
}
