package scheduling

import (
	"fmt"
	"slices"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// ChargeComponent is what part of a booking (or of a statement) a line prices.
type ChargeComponent string

// Charge components. The first four come from bookings; the last two only appear on
// statements.
const (
	ComponentInstrumentTime   ChargeComponent = "instrument_time"
	ComponentStaffTime        ChargeComponent = "staff_time"
	ComponentLateCancellation ChargeComponent = "late_cancellation"
	ComponentNoShow           ChargeComponent = "no_show"
	ComponentAdjustment       ChargeComponent = "adjustment"
	ComponentMonthlyCap       ChargeComponent = "monthly_cap"
)

// ChargeRule names the policy rule that produced a line's minutes or amount, so a
// project can check each line against the published policy. The names are stable:
// statements and CSV exports carry them.
type ChargeRule string

// Charge rules.
const (
	ChargeRuleBooked  = ChargeRule(BasisBooked)  // the booked range was charged
	ChargeRuleUsed    = ChargeRule(BasisUsed)    // the usage was charged
	ChargeRuleGreater = ChargeRule(BasisGreater) // the longer of booked and used
	// ChargeRuleMinimum: the charged time was raised to the policy's minimum.
	ChargeRuleMinimum          ChargeRule = "minimum_charge"
	ChargeRuleLateCancellation ChargeRule = "late_cancellation"
	ChargeRuleNoShow           ChargeRule = "no_show"
	// ChargeRuleUnattendedCap: the amount was lowered so the booking's instrument
	// charge does not pass the unattended cap; minutes still show the time.
	ChargeRuleUnattendedCap ChargeRule = "unattended_cap"
	ChargeRuleMonthlyCap    ChargeRule = "monthly_cap"        // statement line lowering the month to the cap
	ChargeRuleAdjustment    ChargeRule = "manager_adjustment" // a manager's credit or debit
)

// ChargeLine is one priced component of a booking over the part of it one rate schedule
// prices. AmountMinor = round_half_up(Minutes × HourlyRateMinor ÷ 60), the package's one
// rounding rule (see billing_money.go), except where Rule is unattended_cap.
type ChargeLine struct {
	BookingID       string          `json:"booking_id"`
	Component       ChargeComponent `json:"component"`
	Rule            ChargeRule      `json:"rule"`
	From            time.Time       `json:"from"` // the span this line's minutes were measured on
	To              time.Time       `json:"to"`
	Minutes         int             `json:"minutes"`
	ScheduleID      string          `json:"schedule_id"`
	Currency        string          `json:"currency"`
	HourlyRateMinor int64           `json:"hourly_rate_minor"`
	AmountMinor     int64           `json:"amount_minor"`
}

// ChargeInput is everything known about one booking when it is priced.
type ChargeInput struct {
	Booking   Booking            // kind, range, status, cancellation instant, instrument
	RateClass accounts.RateClass // the project's
	Usages    []Usage
	// RebookedMinutes is how much of a cancelled booking's range others booked since.
	RebookedMinutes int
	// NoShow is set when the booking was recorded as a no-show. A no-show with usage
	// (someone turned up after the grace) is charged as a booking that went ahead.
	NoShow bool
	// DisplacedByService is set when a service booking cancelled this one.
	DisplacedByService bool
	Now                time.Time // an open usage runs to now
}

// errRateRange is what pricing answers for a rate that RateSchedule.Validate refuses.
func errRateRange() error {
	return beamledger.InvalidField("classes", "an hourly rate is outside 0 to 10^10 minor units")
}

// chargePlan is which time of a booking is charged, as what and under which rule,
// before it is priced.
type chargePlan struct {
	component ChargeComponent
	rule      ChargeRule
	spans     []Interval // the time measured, in order, not overlapping
	minutes   int        // the time charged after increment and minimum
}

// ComputeCharges prices one booking under policy p (which the caller has validated):
// one line per component and rate schedule in force, instrument time before staff
// time, in time order. Time is always elapsed time between instants, so a night across
// a change of clocks is charged as long as it lasted. Service bookings, early
// cancellations and uncharged rules give no lines.
//
// The charged minutes are laid from the start of the measured time: what the increment
// or the minimum adds runs on past its end, and what rebooking by others removes comes
// off its end. A rate change inside that time splits it at the change instant, each
// piece priced by the schedule in force over it. Each line's amount is
// round_half_up(minutes × hourly rate ÷ 60) in minor units, rounded once per line. Under greater_of_booked_and_used both
// are priced and the dearer is charged; with one rate in force that is the longer time,
// and across a rate change it keeps longer work from ever costing less.
//
// Errors: ErrInvalid for a malformed input; RuleViolation "rate_schedule_in_force"
// when no schedule covers the charged time, "rate_class_in_schedule" when the schedule
// has no rates for the project's class.
func ComputeCharges(in ChargeInput, schedules []RateSchedule, p BillingPolicy) ([]ChargeLine, error) {
	return computeCharges(new(chargeScratch), in, schedules, p)
}

// computeCharges is ComputeCharges working in sc, which a caller pricing many bookings
// passes to each in turn.
func computeCharges(sc *chargeScratch, in ChargeInput, schedules []RateSchedule, p BillingPolicy) ([]ChargeLine, error) {
	if err := in.validate(); err != nil {
		return nil, err
	}
	var best []ChargeLine
	bestAmount, bestMinutes := int64(-1), 0
	for i, plan := range p.plans(sc, in) {
		lines, err := p.price(&sc.priced[i], in, plan, schedules)
		if err != nil {
			return nil, err
		}
		if amount := sumLines(lines); amount > bestAmount || (amount == bestAmount && plan.minutes > bestMinutes) {
			best, bestAmount, bestMinutes = lines, amount, plan.minutes
		}
	}
	return slices.Clone(best), nil
}

// chargeScratch is where computeCharges works. Nearly every booking has one or two
// plans, a usage or two and one rate schedule in force over it, so its spans, plans
// and lines fit here rather than in allocations of their own, and only the lines
// charged are copied out: pricing a month of a facility allocated more than it
// computed. Each booking overwrites what the one before left.
type chargeScratch struct {
	booked [1]Interval
	used   [2]Interval
	plans  [2]chargePlan
	priced [2]pricedScratch // one per plan
}

// pricedScratch is where one plan's lines are priced.
type pricedScratch struct {
	lines      [2]ChargeLine
	staffRates [2]int64
}

// price turns a plan into lines (in sc while they fit): instrument time, capped for
// unattended bookings, then staff time for the kinds that add it.
func (p BillingPolicy) price(sc *pricedScratch, in ChargeInput, plan chargePlan, schedules []RateSchedule) ([]ChargeLine, error) {
	lines, staffRates, err := priceInstrument(sc.lines[:0], sc.staffRates[:0], in, plan, schedules)
	if err != nil {
		return nil, err
	}
	var staff []ChargeLine
	if plan.component == ComponentInstrumentTime && slices.Contains(p.StaffTimeKinds, in.Booking.Kind) {
		for i, l := range lines {
			var ok bool
			l.Component, l.HourlyRateMinor = ComponentStaffTime, staffRates[i]
			if l.AmountMinor, ok = lineAmountMinor(l.Minutes, l.HourlyRateMinor); !ok {
				return nil, errRateRange()
			}
			staff = append(staff, l)
		}
	}
	if in.Booking.Kind == KindUnattended && p.UnattendedCapMinor > 0 {
		capLines(lines, p.UnattendedCapMinor)
	}
	return append(lines, staff...), nil
}

// validate checks what pricing relies on.
func (in ChargeInput) validate() error {
	var fe beamledger.FieldErrors // made at the first problem: valid input allocates nothing
	add := func(field, reason string) {
		if fe == nil {
			fe = beamledger.FieldErrors{}
		}
		fe.Add(field, reason)
	}
	b := in.Booking
	if !b.Kind.Valid() {
		add("kind", "must be one of independent, assisted, training, unattended, service")
	}
	if !b.Start.Before(b.End) {
		add("end", "must be after start")
	}
	if b.Status == StatusCancelled && b.CancelledAt == nil {
		add("cancelled_at", "is required for a cancelled booking")
	}
	if !in.RateClass.Valid() {
		add("rate_class", "must be one of internal, external_academic, commercial")
	}
	if in.RebookedMinutes < 0 {
		add("rebooked_minutes", "must not be negative")
	}
	for i, u := range in.Usages {
		if u.EndedAt == nil && in.Now.IsZero() {
			add("now", "is required while a usage is open: it runs to now")
		} else if span := u.Span(in.Now); span.End.Before(span.Start) {
			add(fmt.Sprintf("usages[%d].ended_at", i), "must not be before started_at")
		}
	}
	return fe.Err()
}

// plans decides what of the booking may be charged: none, one plan, or for the
// greater-of basis the booked and the used plan, of which ComputeCharges charges the
// dearer. The plans and their spans are kept in sc.
func (p BillingPolicy) plans(sc *chargeScratch, in ChargeInput) []chargePlan {
	b := in.Booking
	sc.booked[0] = Interval{Start: b.Start, End: b.End}
	booked := sc.booked[:]
	switch {
	case b.Kind == KindService:
		return nil
	case b.Status == StatusCancelled:
		if in.DisplacedByService && p.Displaced == DisplacedNoCharge {
			return nil
		}
		window := time.Duration(p.CancellationWindowMinutes) * time.Minute
		if b.Start.Sub(*b.CancelledAt) >= window || p.LateCancellation == LateCancelNoCharge {
			return nil
		}
		d := b.Duration()
		if p.LateCancellation == LateCancelBookedLessRebooked {
			d = max(d-time.Duration(in.RebookedMinutes)*time.Minute, 0)
		}
		return nonEmpty(sc.plans[:0], chargePlan{ComponentLateCancellation, ChargeRuleLateCancellation, booked, p.billedMinutes(d)})
	}
	used := mergeSpans(sc.used[:0], in.Usages, in.Now)
	if in.NoShow && len(used) == 0 {
		if p.NoShow != NoShowBooked {
			return nil
		}
		return nonEmpty(sc.plans[:0], chargePlan{ComponentNoShow, ChargeRuleNoShow, booked, p.billedMinutes(b.Duration())})
	}
	went := func(spans []Interval) chargePlan {
		plan := chargePlan{ComponentInstrumentTime, ChargeRule(p.Basis), spans, p.billedMinutes(spansLength(spans))}
		if plan.minutes > 0 && plan.minutes < p.MinimumMinutes {
			plan.minutes, plan.rule = p.MinimumMinutes, ChargeRuleMinimum
		}
		return plan
	}
	switch p.Basis {
	case BasisBooked:
		return nonEmpty(sc.plans[:0], went(booked))
	case BasisUsed:
		return nonEmpty(sc.plans[:0], went(used))
	}
	return nonEmpty(sc.plans[:0], went(booked), went(used))
}

// nonEmpty appends to dst the plans that charge some time.
func nonEmpty(dst []chargePlan, plans ...chargePlan) []chargePlan {
	for _, pl := range plans {
		if pl.minutes > 0 {
			dst = append(dst, pl)
		}
	}
	return dst
}

// priceInstrument lays the plan's minutes over its spans, splits them at rate changes
// and prices each schedule's minutes at the booking kind's instrument rate, appending
// the lines to lines and, beside each, the staff rate of the same schedule and class
// to staffRates.
func priceInstrument(lines []ChargeLine, staffRates []int64, in ChargeInput, plan chargePlan, schedules []RateSchedule) ([]ChargeLine, []int64, error) {
	b := in.Booking
	// One group per schedule, from its first to its last piece, and the charged time up
	// to the end of each: nearly always one, so they start on the stack.
	var groupsBuf [2]SchedulePiece
	var endsBuf [2]time.Duration
	groups, ends := groupsBuf[:0], endsBuf[:0]
	var run time.Duration
	var piecesBuf [2]SchedulePiece
	var fitBuf [2]Interval
	for _, span := range fitSpans(fitBuf[:0], plan.spans, time.Duration(plan.minutes)*time.Minute) {
		pieces, err := appendSchedulePieces(piecesBuf[:0], schedules, b.InstrumentID, span.Start, span.End)
		if err != nil {
			return nil, nil, err
		}
		for _, pc := range pieces {
			run += pc.End.Sub(pc.Start)
			if n := len(groups); n > 0 && groups[n-1].Schedule.EffectiveFrom.Equal(pc.Schedule.EffectiveFrom) {
				groups[n-1].End, ends[n-1] = pc.End, run
				continue
			}
			groups, ends = append(groups, pc), append(ends, run)
		}
	}
	done := 0 // whole minutes charged to earlier groups
	for i, g := range groups {
		upTo := int(ends[i] / time.Minute) // the total is whole minutes, so the last group ends on it
		minutes := upTo - done
		done = upTo
		if minutes == 0 {
			continue
		}
		rates, ok := g.Schedule.Rates(in.RateClass)
		if !ok {
			return nil, nil, beamledger.RuleViolation("rate_class_in_schedule",
				fmt.Sprintf("rate schedule %q has no rates for the %s class", g.Schedule.ID, in.RateClass), nil)
		}
		rate, _ := rates.InstrumentHourlyMinor(b.Kind)
		amount, ok := lineAmountMinor(minutes, rate)
		if !ok {
			return nil, nil, errRateRange()
		}
		staffRates = append(staffRates, rates.StaffHourlyMinor)
		lines = append(lines, ChargeLine{
			BookingID: b.ID, Component: plan.component, Rule: plan.rule,
			From: g.Start, To: g.End, Minutes: minutes,
			ScheduleID: g.Schedule.ID, Currency: g.Schedule.Currency,
			HourlyRateMinor: rate, AmountMinor: amount,
		})
	}
	return lines, staffRates, nil
}

// fitSpans appends to dst spans that hold exactly d of time from the first one's start: the
// last span runs on past its end when d is longer, and spans are cut from the end when
// it is shorter. Laying charged time this way means more measured time only ever adds
// time at the end, so a charge cannot fall as work goes on.
func fitSpans(dst []Interval, spans []Interval, d time.Duration) []Interval {
	out := dst
	for i, s := range spans {
		if d <= 0 {
			break
		}
		if l := s.End.Sub(s.Start); l > d || i == len(spans)-1 {
			s.End = s.Start.Add(d)
		}
		d -= s.End.Sub(s.Start)
		out = append(out, s)
	}
	return out
}

// capLines lowers amounts so that the lines sum to at most capMinor: lines are charged
// in time order until the cap is reached, the line that reaches it is cut to what is
// left and later lines charge nothing. Each line it lowers names the cap as its rule,
// and keeps its minutes, so the statement still shows the time used.
func capLines(lines []ChargeLine, capMinor int64) {
	left := capMinor
	for i := range lines {
		if lines[i].AmountMinor > left {
			lines[i].AmountMinor, lines[i].Rule = left, ChargeRuleUnattendedCap
		}
		left -= lines[i].AmountMinor
	}
}

// sumLines is the lines' total. Amounts are bounded by the rate bound, so it cannot wrap.
func sumLines(lines []ChargeLine) int64 {
	var s int64
	for _, l := range lines {
		s += l.AmountMinor
	}
	return s
}

// mergeSpans appends to dst the union of the usages' non-empty spans (open ones run to
// now), in time order with overlaps merged, so time worked twice over is charged once.
func mergeSpans(dst []Interval, usages []Usage, now time.Time) []Interval {
	spans := dst
	for _, u := range usages {
		if s := u.Span(now); s.Start.Before(s.End) {
			spans = append(spans, s)
		}
	}
	return mergeIntervals(spans)
}

// spansLength is the elapsed time of spans that do not overlap.
func spansLength(spans []Interval) time.Duration {
	var d time.Duration
	for _, s := range spans {
		d += s.End.Sub(s.Start)
	}
	return d
}
