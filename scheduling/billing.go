package scheduling

import (
	"fmt"
	"slices"
	"time"

	"beamledger"
)

// BillingBasis says which time of a booking that went ahead is charged.
type BillingBasis string

// Billing bases. Each is also the ChargeRule a line charged on it names.
const (
	BasisBooked  BillingBasis = "booked_time"                // the reserved range, used or not
	BasisUsed    BillingBasis = "used_time"                  // check-in to check-out, overrun included
	BasisGreater BillingBasis = "greater_of_booked_and_used" // whichever is longer
)

// LateCancellationRule says what a cancellation inside the cancellation window costs.
type LateCancellationRule string

// Late-cancellation rules.
const (
	// LateCancelBookedLessRebooked charges the booked time less what others rebooked:
	// the facility loses only the time nobody else could use.
	LateCancelBookedLessRebooked LateCancellationRule = "booked_less_rebooked"
	LateCancelBooked             LateCancellationRule = "booked"    // all of the booked time
	LateCancelNoCharge           LateCancellationRule = "no_charge" // nothing
)

// NoShowRule says what a booking nobody turned up for costs.
type NoShowRule string

// No-show rules.
const (
	NoShowBooked   NoShowRule = "booked"    // the booked time
	NoShowNoCharge NoShowRule = "no_charge" // nothing
)

// DisplacedRule says what a booking cancelled by a service booking costs its project.
type DisplacedRule string

// Displaced rules.
const (
	// DisplacedNoCharge: the facility took the time back, so the displaced pay nothing.
	DisplacedNoCharge DisplacedRule = "no_charge"
	// DisplacedAsCancellation treats it as any cancellation at the instant it happened.
	DisplacedAsCancellation DisplacedRule = "as_cancellation"
)

// BillingPolicy is how a facility turns bookings and usage into charges: the facility
// default with an instrument's override applied (see With). Times are elapsed time and
// money is minor units of the rate schedule's currency.
type BillingPolicy struct {
	Basis BillingBasis `json:"basis"`
	// IncrementMinutes: charged time is rounded up to a multiple of this.
	IncrementMinutes int `json:"increment_minutes"`
	// MinimumMinutes is the least a booking that went ahead is charged for. It does not
	// raise late-cancellation or no-show charges, which charge time that went unused.
	MinimumMinutes int `json:"minimum_minutes"`
	// CancellationWindowMinutes: a cancellation less than this long before the start
	// is late.
	CancellationWindowMinutes int                  `json:"cancellation_window_minutes"`
	LateCancellation          LateCancellationRule `json:"late_cancellation"`
	// NoShowGraceMinutes: a booking with no usage begun this soon after its start is a
	// no-show (see IsNoShow). Keep it equal to the instrument's Rules.NoShowGraceMinutes,
	// which decides when the no-show is recorded.
	NoShowGraceMinutes int        `json:"no_show_grace_minutes"`
	NoShow             NoShowRule `json:"no_show"`
	// UnattendedCapMinor caps the instrument charge of one unattended booking; 0 means
	// no cap. Overnight runs are long and mostly unwatched, so the cap keeps them
	// affordable while the hourly rate still prices short ones.
	UnattendedCapMinor int64 `json:"unattended_cap_minor"`
	// StaffTimeKinds are the booking kinds that add the staff hourly rate for their
	// whole charged time: assisted and training, or fewer.
	StaffTimeKinds []BookingKind `json:"staff_time_kinds"`
	Displaced      DisplacedRule `json:"displaced"`
	// MonthlyCapMinor caps one project's charges in a calendar month, across all
	// instruments; 0 means no cap. Being per project, it is the facility's alone:
	// BillingPolicyOverride has no field for it, and statements apply it as a line.
	MonthlyCapMinor int64 `json:"monthly_cap_minor"`
	// FiscalYearStartMonth is the month (1 to 12) the facility's fiscal year starts
	// in, which the recovery and utilization reports' years follow (FiscalYearBounds).
	// Like the monthly cap it is the facility's alone.
	FiscalYearStartMonth int `json:"fiscal_year_start_month"`
}

// BillingPolicyOverride is an instrument's departure from the facility's policy: a nil
// field inherits. A non-nil empty StaffTimeKinds replaces the inherited list (JSON []
// clears, null or absent inherits).
type BillingPolicyOverride struct {
	Basis                     *BillingBasis         `json:"basis,omitempty"`
	IncrementMinutes          *int                  `json:"increment_minutes,omitempty"`
	MinimumMinutes            *int                  `json:"minimum_minutes,omitempty"`
	CancellationWindowMinutes *int                  `json:"cancellation_window_minutes,omitempty"`
	LateCancellation          *LateCancellationRule `json:"late_cancellation,omitempty"`
	NoShowGraceMinutes        *int                  `json:"no_show_grace_minutes,omitempty"`
	NoShow                    *NoShowRule           `json:"no_show,omitempty"`
	UnattendedCapMinor        *int64                `json:"unattended_cap_minor,omitempty"`
	StaffTimeKinds            []BookingKind         `json:"staff_time_kinds"` // no omitempty: [] must survive a round trip
	Displaced                 *DisplacedRule        `json:"displaced,omitempty"`
}

// DefaultBillingPolicy is the project's default policy from REFERENCE §3 [practice]
// (with the fiscal year the calendar year):
// the greater of booked and used time, rounded up to 15 minutes, at least 1 h per
// booking; cancellations later than 24 h before the start pay the booked time less what
// others rebooked; a no-show (no usage within 30 min) pays the booked time; assisted
// and training time add the staff rate; the displaced pay nothing. The unattended and
// monthly caps are amounts in the facility's currency, so they start unset (0).
func DefaultBillingPolicy() BillingPolicy {
	return BillingPolicy{
		Basis:                     BasisGreater,
		IncrementMinutes:          15,
		MinimumMinutes:            60,
		CancellationWindowMinutes: 24 * 60,
		LateCancellation:          LateCancelBookedLessRebooked,
		NoShowGraceMinutes:        30,
		NoShow:                    NoShowBooked,
		StaffTimeKinds:            []BookingKind{KindAssisted, KindTraining},
		Displaced:                 DisplacedNoCharge,
		FiscalYearStartMonth:      1,
	}
}

// With returns p with the override's set fields in place. The result shares no slice
// with p or o.
func (p BillingPolicy) With(o BillingPolicyOverride) BillingPolicy {
	setInt := func(dst *int, src *int) {
		if src != nil {
			*dst = *src
		}
	}
	if o.Basis != nil {
		p.Basis = *o.Basis
	}
	setInt(&p.IncrementMinutes, o.IncrementMinutes)
	setInt(&p.MinimumMinutes, o.MinimumMinutes)
	setInt(&p.CancellationWindowMinutes, o.CancellationWindowMinutes)
	if o.LateCancellation != nil {
		p.LateCancellation = *o.LateCancellation
	}
	setInt(&p.NoShowGraceMinutes, o.NoShowGraceMinutes)
	if o.NoShow != nil {
		p.NoShow = *o.NoShow
	}
	if o.UnattendedCapMinor != nil {
		p.UnattendedCapMinor = *o.UnattendedCapMinor
	}
	if o.StaffTimeKinds != nil {
		p.StaffTimeKinds = o.StaffTimeKinds
	}
	if o.Displaced != nil {
		p.Displaced = *o.Displaced
	}
	p.StaffTimeKinds = slices.Clone(p.StaffTimeKinds)
	return p
}

// Validate checks the policy, naming each offending field by its JSON name. The upper
// bounds catch unit slips (hours typed as minutes) and keep products far from overflow.
func (p BillingPolicy) Validate() error {
	fe := beamledger.FieldErrors{}
	between := func(field string, v, lo, hi int64) {
		if v < lo || v > hi {
			fe.Add(field, fmt.Sprintf("must be between %d and %d", lo, hi))
		}
	}
	if !slices.Contains([]BillingBasis{BasisBooked, BasisUsed, BasisGreater}, p.Basis) {
		fe.Add("basis", "must be one of booked_time, used_time, greater_of_booked_and_used")
	}
	between("increment_minutes", int64(p.IncrementMinutes), 1, minutesPerDay)
	between("minimum_minutes", int64(p.MinimumMinutes), 0, minutesPerDay)
	between("cancellation_window_minutes", int64(p.CancellationWindowMinutes), 0, maxLeadTimeMinutes)
	if !slices.Contains([]LateCancellationRule{LateCancelBookedLessRebooked, LateCancelBooked, LateCancelNoCharge}, p.LateCancellation) {
		fe.Add("late_cancellation", "must be one of booked_less_rebooked, booked, no_charge")
	}
	between("no_show_grace_minutes", int64(p.NoShowGraceMinutes), 0, minutesPerDay)
	if !slices.Contains([]NoShowRule{NoShowBooked, NoShowNoCharge}, p.NoShow) {
		fe.Add("no_show", "must be one of booked, no_charge")
	}
	between("unattended_cap_minor", p.UnattendedCapMinor, 0, maxAmountMinor)
	for i, k := range p.StaffTimeKinds {
		if !k.NeedsStaff() || slices.Index(p.StaffTimeKinds, k) != i {
			fe.Add("staff_time_kinds", "may list assisted and training, each once")
		}
	}
	if !slices.Contains([]DisplacedRule{DisplacedNoCharge, DisplacedAsCancellation}, p.Displaced) {
		fe.Add("displaced", "must be one of no_charge, as_cancellation")
	}
	between("monthly_cap_minor", p.MonthlyCapMinor, 0, maxAmountMinor)
	between("fiscal_year_start_month", int64(p.FiscalYearStartMonth), 1, 12)
	return fe.Err()
}

// IsNoShow reports whether a booking starting at start is a no-show judged at now: its
// grace period has passed and no usage began before the grace ended. A usage begun
// early counts as turning up.
func (p BillingPolicy) IsNoShow(start time.Time, usages []Usage, now time.Time) bool {
	deadline := start.Add(time.Duration(p.NoShowGraceMinutes) * time.Minute)
	if now.Before(deadline) {
		return false
	}
	return !slices.ContainsFunc(usages, func(u Usage) bool { return u.StartedAt.Before(deadline) })
}

// billedMinutes rounds elapsed time up to whole minutes and then to the increment.
func (p BillingPolicy) billedMinutes(d time.Duration) int {
	if d <= 0 {
		return 0
	}
	m := int((d + time.Minute - 1) / time.Minute)
	inc := max(p.IncrementMinutes, 1)
	return (m + inc - 1) / inc * inc
}
