package scheduling

import (
	"errors"
	"maps"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// classSchedule is refSchedule with an external academic class at REFERENCE §3's
// [constructed] 217.00/h.
func classSchedule() RateSchedule {
	s := refSchedule()
	ext := ClassRates{RateClass: accounts.RateExternalAcademic, IndependentHourlyMinor: 21700, AssistedHourlyMinor: 21700,
		TrainingHourlyMinor: 21700, UnattendedHourlyMinor: 10850, StaffHourlyMinor: 10075}
	s.Classes = append(s.Classes, ext)
	return s
}

func TestEstimateSharesPricesEachAccountAtItsClass(t *testing.T) {
	split := []FundingShare{{"grant", 5000}, {"centre", 3000}, {"dept", 2000}}
	accts := []FundingAccount{{ID: "grant", RateClass: accounts.RateExternalAcademic}, {ID: "centre"}, {ID: "dept"}}
	pr := EstimatePricing{ProjectClass: accounts.RateInternal, Schedules: []RateSchedule{classSchedule()}, Policy: refPolicy()}
	b := booking("b", KindIndependent, berlin(t, 2, 9, 0), berlin(t, 2, 12, 0))
	got, err := EstimateShares(b, split, accts, pr)
	// [constructed] REFERENCE §3, 3 h booked: external 651.00 × 50 % = 325.50 to the grant;
	// internal 360.00 × 30 % / 20 % = 108.00 / 72.00.
	want := map[string]int64{"grant": 32550, "centre": 10800, "dept": 7200}
	if err != nil || !maps.Equal(got, want) {
		t.Fatalf("estimate %v %v, want %v", got, err, want)
	}
	// Estimated on booked time whatever the basis: under used_time a booking not yet
	// used still commits its booked time. [constructed] 30 min → 1 h minimum → 120.00.
	pr.Policy.Basis = BasisUsed
	short := booking("s", KindIndependent, berlin(t, 3, 13, 0), berlin(t, 3, 13, 30))
	got, err = EstimateShares(short, []FundingShare{{"centre", 10000}}, accts, pr)
	if err != nil || got["centre"] != 12000 {
		t.Errorf("short booking estimate %v %v, want 12000", got, err)
	}
}

func TestCheckFundingCapsRefusesOnlyAddedCost(t *testing.T) {
	split := []FundingShare{{"cap", 10000}}
	accts := []FundingAccount{{ID: "cap", Code: "CAP-9", CapMinor: 30000}}
	pr := EstimatePricing{ProjectClass: accounts.RateInternal, Schedules: []RateSchedule{refSchedule()}, Policy: refPolicy()}
	b := booking("b", KindIndependent, berlin(t, 2, 9, 0), berlin(t, 2, 11, 0)) // [constructed] 2 h → 240.00
	check := FundingCapCheck{Booking: b, Split: split, Accounts: accts, Pricing: pr, UsedMinor: map[string]int64{"cap": 6000}}
	if err := CheckFundingCaps(check); err != nil { // 60.00 + 240.00 = 300.00, the cap itself
		t.Errorf("at the cap: %v", err)
	}
	check.UsedMinor["cap"] = 6001
	if err := CheckFundingCaps(check); !errors.Is(err, beamledger.ErrRule) {
		t.Errorf("one minor unit past the cap: %v", err)
	}
	// Moved from an equally long range, it adds nothing and passes even over the cap.
	prev := booking("b", KindIndependent, berlin(t, 3, 9, 0), berlin(t, 3, 11, 0))
	check.Previous, check.UsedMinor["cap"] = &prev, 50000
	if err := CheckFundingCaps(check); err != nil {
		t.Errorf("move adding no cost: %v", err)
	}
	prev.End = berlin(t, 3, 10, 0) // extended from 1 h: adds 120.00
	if err := CheckFundingCaps(check); !errors.Is(err, beamledger.ErrRule) {
		t.Errorf("extension past the cap: %v", err)
	}
	// Without a capped account nothing is priced: no schedule is needed.
	check.Accounts[0].CapMinor, check.Pricing.Schedules = 0, nil
	if err := CheckFundingCaps(check); err != nil {
		t.Errorf("uncapped: %v", err)
	}
}

// TestEstimateCancelledSharesCountsLateCancellation: a booking cancelled late still
// commits its late-cancellation charge to its accounts; one cancelled in time, or
// displaced by service, commits nothing.
func TestEstimateCancelledSharesCountsLateCancellation(t *testing.T) {
	split := []FundingShare{{"grant", 5000}, {"centre", 3000}, {"dept", 2000}}
	accts := []FundingAccount{{ID: "grant", RateClass: accounts.RateExternalAcademic}, {ID: "centre"}, {ID: "dept"}}
	pr := EstimatePricing{ProjectClass: accounts.RateInternal, Schedules: []RateSchedule{classSchedule()}, Policy: refPolicy()}
	cancelled := func(hoursAhead int) Booking {
		b := booking("b", KindIndependent, berlin(t, 2, 9, 0), berlin(t, 2, 12, 0))
		at := b.Start.Add(-time.Duration(hoursAhead) * time.Hour)
		b.Status, b.CancelledAt = StatusCancelled, &at
		return b
	}
	// [constructed] REFERENCE §3's default policy: cancelled 10 h ahead (inside 24 h),
	// 3 h booked less 1 h 10 min rebooked = 1 h 50 min, rounded up to 15 min = 2 h:
	// external 434.00 × 50 % = 217.00 to the grant; internal 240.00 × 30 % / 20 % =
	// 72.00 / 48.00.
	got, err := EstimateCancelledShares(cancelled(10), 70, false, split, accts, pr)
	want := map[string]int64{"grant": 21700, "centre": 7200, "dept": 4800}
	if err != nil || !maps.Equal(got, want) {
		t.Errorf("late cancellation %v %v, want %v", got, err, want)
	}
	for name, tc := range map[string]struct {
		hoursAhead int
		displaced  bool
	}{"cancelled in time": {30, false}, "displaced by service": {10, true}} {
		got, err := EstimateCancelledShares(cancelled(tc.hoursAhead), 0, tc.displaced, split, accts, pr)
		if err != nil || got["grant"] != 0 || got["centre"] != 0 || got["dept"] != 0 {
			t.Errorf("%s: %v %v, want nothing", name, got, err)
		}
	}
	active := booking("a", KindIndependent, berlin(t, 2, 9, 0), berlin(t, 2, 12, 0))
	if _, err := EstimateCancelledShares(active, 0, false, split, accts, pr); !errors.Is(err, beamledger.ErrInvalid) {
		t.Errorf("an active booking: %v, want invalid", err)
	}
}
