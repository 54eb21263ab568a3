package scheduling

import (
	"errors"
	"math/rand/v2"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// refRates are the rates of REFERENCE §3's [constructed] examples, in cents: 120/h
// internal (independent and assisted alike), 60/h unattended, 65/h staff.
func refRates(class accounts.RateClass) ClassRates {
	return ClassRates{RateClass: class, IndependentHourlyMinor: 12000, AssistedHourlyMinor: 12000,
		TrainingHourlyMinor: 12000, UnattendedHourlyMinor: 6000, StaffHourlyMinor: 6500}
}

var refSince = time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)

func refSchedule() RateSchedule {
	return RateSchedule{ID: "rs-1", InstrumentID: "tem-1", EffectiveFrom: refSince, Currency: "EUR",
		Classes: []ClassRates{refRates(accounts.RateInternal)}}
}

// refPolicy is the project's default policy with REFERENCE §3's cap of 400 per
// unattended booking.
func refPolicy() BillingPolicy {
	p := DefaultBillingPolicy()
	p.UnattendedCapMinor = 40000
	return p
}

// berlin reads a wall time on Monday 2 March 2026 (no change of clocks near) in Berlin.
func berlin(t *testing.T, day, h, m int) time.Time {
	t.Helper()
	loc, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Fatal(err)
	}
	return time.Date(2026, 3, day, h, m, 0, 0, loc)
}

func used(from, to time.Time) Usage { return Usage{StartedAt: from, EndedAt: &to} }

func booking(id string, kind BookingKind, start, end time.Time) Booking {
	return Booking{ID: id, InstrumentID: "tem-1", ProjectID: "p-1", Kind: kind, Start: start, End: end, Status: StatusActive}
}

func cancelled(b Booking, at time.Time) Booking {
	b.Status, b.CancelledAt = StatusCancelled, &at
	return b
}

// lineWant is what a test checks of a charge line.
type lineWant struct {
	component ChargeComponent
	rule      ChargeRule
	minutes   int
	rate      int64
	amount    int64
}

func checkLines(t *testing.T, name string, got []ChargeLine, want []lineWant) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d lines %+v, want %d", name, len(got), got, len(want))
	}
	for i, w := range want {
		g := got[i]
		if g.Component != w.component || g.Rule != w.rule || g.Minutes != w.minutes || g.HourlyRateMinor != w.rate || g.AmountMinor != w.amount {
			t.Errorf("%s line %d: got %s/%s %d min at %d = %d, want %s/%s %d min at %d = %d", name, i,
				g.Component, g.Rule, g.Minutes, g.HourlyRateMinor, g.AmountMinor,
				w.component, w.rule, w.minutes, w.rate, w.amount)
		}
	}
}

func sumAmounts(lines []ChargeLine) int64 {
	var s int64
	for _, l := range lines {
		s += l.AmountMinor
	}
	return s
}

// refMonth is REFERENCE §3's five [constructed] bookings, in the order given there.
func refMonth(t *testing.T) []ChargeInput {
	in := func(b Booking, us ...Usage) ChargeInput {
		return ChargeInput{Booking: b, RateClass: accounts.RateInternal, Usages: us, Now: berlin(t, 31, 0, 0)}
	}
	late := in(cancelled(booking("b3", KindIndependent, berlin(t, 4, 10, 0), berlin(t, 4, 14, 0)), berlin(t, 4, 0, 0)))
	late.RebookedMinutes = 90
	return []ChargeInput{
		in(booking("b1", KindIndependent, berlin(t, 2, 9, 0), berlin(t, 2, 12, 0)), used(berlin(t, 2, 9, 10), berlin(t, 2, 11, 55))),
		// REFERENCE gives only the end of the usage; a 13:00 start makes 40 min, which the
		// 15-minute increment makes the 45 min REFERENCE states.
		in(booking("b2", KindIndependent, berlin(t, 3, 13, 0), berlin(t, 3, 13, 30)), used(berlin(t, 3, 13, 0), berlin(t, 3, 13, 40))),
		late,
		in(booking("b4", KindUnattended, berlin(t, 5, 18, 0), berlin(t, 6, 8, 0)), used(berlin(t, 5, 18, 0), berlin(t, 6, 8, 0))),
		in(booking("b5", KindAssisted, berlin(t, 9, 14, 0), berlin(t, 9, 16, 0)), used(berlin(t, 9, 14, 0), berlin(t, 9, 16, 0))),
	}
}

func TestComputeChargesReferenceExamples(t *testing.T) {
	month := refMonth(t)
	wants := [][]lineWant{
		// [constructed] REFERENCE §3: booked 09:00–12:00, used 09:10–11:55 → 3 h → 360.00.
		{{ComponentInstrumentTime, ChargeRuleGreater, 180, 12000, 36000}},
		// [constructed] REFERENCE §3: booked 13:00–13:30, used to 13:40 → 45 min → 1 h minimum → 120.00.
		{{ComponentInstrumentTime, ChargeRuleMinimum, 60, 12000, 12000}},
		// [constructed] REFERENCE §3: 4 h cancelled 10 h ahead, 1.5 h rebooked → 2.5 h → 300.00.
		{{ComponentLateCancellation, ChargeRuleLateCancellation, 150, 12000, 30000}},
		// [constructed] REFERENCE §3: unattended 18:00–08:00 → 14 h × 60 = 840 → capped 400.00.
		{{ComponentInstrumentTime, ChargeRuleUnattendedCap, 840, 6000, 40000}},
		// [constructed] REFERENCE §3: assisted 2 h → 240 + 130 = 370.00.
		{{ComponentInstrumentTime, ChargeRuleGreater, 120, 12000, 24000}, {ComponentStaffTime, ChargeRuleGreater, 120, 6500, 13000}},
	}
	var total int64
	for i, in := range month {
		lines, err := ComputeCharges(in, []RateSchedule{refSchedule()}, refPolicy())
		if err != nil {
			t.Fatalf("%s: %v", in.Booking.ID, err)
		}
		checkLines(t, in.Booking.ID, lines, wants[i])
		total += sumAmounts(lines)
	}
	if total != 155000 { // [constructed] REFERENCE §3: month total 1 550.00.
		t.Errorf("month total %d, want 155000", total)
	}
}

func TestComputeChargesAcrossDST(t *testing.T) {
	ny, err := time.LoadLocation("America/New_York")
	if err != nil {
		t.Fatal(err)
	}
	start, end := time.Date(2024, 11, 2, 20, 0, 0, 0, ny), time.Date(2024, 11, 3, 8, 0, 0, 0, ny)
	s := refSchedule()
	s.EffectiveFrom = time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC)
	in := ChargeInput{Booking: booking("n", KindIndependent, start, end), RateClass: accounts.RateInternal,
		Usages: []Usage{used(start, end)}, Now: end}
	lines, err := ComputeCharges(in, []RateSchedule{s}, refPolicy())
	if err != nil {
		t.Fatal(err)
	}
	// [computed] REFERENCE §2: New York 2024-11-02 20:00 → 2024-11-03 08:00 is 13 h of
	// elapsed time (the wall clock says 12); at 120/h [constructed] that is 1 560.00.
	checkLines(t, "dst", lines, []lineWant{{ComponentInstrumentTime, ChargeRuleGreater, 780, 12000, 156000}})
}

func TestComputeChargesRateChangeSplits(t *testing.T) {
	later := refSchedule()
	later.ID, later.EffectiveFrom = "rs-2", berlin(t, 2, 10, 30)
	later.Classes = []ClassRates{{RateClass: accounts.RateInternal, IndependentHourlyMinor: 15000, AssistedHourlyMinor: 15000, StaffHourlyMinor: 7000}}
	in := refMonth(t)[0] // booked 09:00–12:00, used 09:10–11:55
	lines, err := ComputeCharges(in, []RateSchedule{later, refSchedule()}, refPolicy())
	if err != nil {
		t.Fatal(err)
	}
	// [constructed] the booked 3 h split at the 10:30 change: 90 min at 120/h = 180.00
	// and 90 min at 150/h = 225.00 (REFERENCE §3 [practice]: a rate change splits a
	// booking at the change instant).
	checkLines(t, "split", lines, []lineWant{
		{ComponentInstrumentTime, ChargeRuleGreater, 90, 12000, 18000},
		{ComponentInstrumentTime, ChargeRuleGreater, 90, 15000, 22500},
	})
	if !lines[0].To.Equal(later.EffectiveFrom) || !lines[1].From.Equal(later.EffectiveFrom) || lines[1].ScheduleID != "rs-2" {
		t.Errorf("split not at the change instant: %+v", lines)
	}

	// [constructed] the split assisted booking adds staff time at each schedule's rate:
	// 14:00–16:00 with a change at 15:00 → 60 min at 120 and at 150, staff 60 min at 65
	// and at 70.
	later.EffectiveFrom = berlin(t, 9, 15, 0)
	in = refMonth(t)[4]
	lines, err = ComputeCharges(in, []RateSchedule{refSchedule(), later}, refPolicy())
	if err != nil {
		t.Fatal(err)
	}
	checkLines(t, "split assisted", lines, []lineWant{
		{ComponentInstrumentTime, ChargeRuleGreater, 60, 12000, 12000},
		{ComponentInstrumentTime, ChargeRuleGreater, 60, 15000, 15000},
		{ComponentStaffTime, ChargeRuleGreater, 60, 6500, 6500},
		{ComponentStaffTime, ChargeRuleGreater, 60, 7000, 7000},
	})

	// [constructed] booked 13:00–13:30 and used to 13:40 (REFERENCE §3's minimum
	// example) with a change at 13:30: the charged hour runs on from 13:00, so 30 min at
	// 120/h and the 30 min the minimum adds at 150/h.
	later.EffectiveFrom = berlin(t, 3, 13, 30)
	lines, err = ComputeCharges(refMonth(t)[1], []RateSchedule{refSchedule(), later}, refPolicy())
	if err != nil {
		t.Fatal(err)
	}
	checkLines(t, "minimum across a change", lines, []lineWant{
		{ComponentInstrumentTime, ChargeRuleMinimum, 30, 12000, 6000},
		{ComponentInstrumentTime, ChargeRuleMinimum, 30, 15000, 7500},
	})

	// [constructed] across a change to a cheaper rate the longer time can cost less:
	// booked 09:00–12:00 with 60/h from 11:00 is 120 min × 120 + 60 min × 60 = 300.00,
	// used 10:00–13:05 (195 min charged) is 60 × 120 + 135 × 60 = 255.00. The dearer,
	// booked, is charged, so working longer never costs less.
	cheaper := refSchedule()
	cheaper.ID, cheaper.EffectiveFrom = "rs-2", berlin(t, 2, 11, 0)
	cheaper.Classes[0].IndependentHourlyMinor = 6000
	in = refMonth(t)[0]
	in.Usages = []Usage{used(berlin(t, 2, 10, 0), berlin(t, 2, 13, 5))}
	lines, err = ComputeCharges(in, []RateSchedule{refSchedule(), cheaper}, refPolicy())
	if err != nil {
		t.Fatal(err)
	}
	checkLines(t, "dearer of booked and used", lines, []lineWant{
		{ComponentInstrumentTime, ChargeRuleGreater, 120, 12000, 24000},
		{ComponentInstrumentTime, ChargeRuleGreater, 60, 6000, 6000},
	})
}

func TestComputeChargesCases(t *testing.T) {
	start, end := berlin(t, 10, 9, 0), berlin(t, 10, 11, 0) // 2 h, independent
	b := booking("c", KindIndependent, start, end)
	now := berlin(t, 31, 0, 0)
	pol := func(edit func(*BillingPolicy)) BillingPolicy {
		p := refPolicy()
		if edit != nil {
			edit(&p)
		}
		return p
	}
	for _, c := range []struct {
		name string
		in   ChargeInput
		p    BillingPolicy
		want []lineWant
	}{
		// [practice] REFERENCE §3: a no-show (no usage within 30 min) is charged the booked time.
		{"no-show", ChargeInput{Booking: b, NoShow: true}, pol(nil),
			[]lineWant{{ComponentNoShow, ChargeRuleNoShow, 120, 12000, 24000}}},
		// [constructed] a policy that waives no-shows charges nothing.
		{"no-show waived", ChargeInput{Booking: b, NoShow: true}, pol(func(p *BillingPolicy) { p.NoShow = NoShowNoCharge }), nil},
		// [constructed] recorded a no-show but came at 09:45 and worked to 11:00: charged as
		// a booking that went ahead, the greater being the booked 2 h.
		{"late arrival", ChargeInput{Booking: b, NoShow: true, Usages: []Usage{used(berlin(t, 10, 9, 45), end)}}, pol(nil),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleGreater, 120, 12000, 24000}}},
		// [practice] REFERENCE §3: a cancellation exactly 24 h ahead is not later than
		// 24 h before the start, so it is free.
		{"cancelled at the window", ChargeInput{Booking: cancelled(b, start.Add(-24*time.Hour))}, pol(nil), nil},
		// [practice] REFERENCE §3: one minute inside the window is late: booked time, none rebooked.
		{"cancelled inside window", ChargeInput{Booking: cancelled(b, start.Add(-24*time.Hour+time.Minute))}, pol(nil),
			[]lineWant{{ComponentLateCancellation, ChargeRuleLateCancellation, 120, 12000, 24000}}},
		// [constructed] all of it rebooked by others: nothing lost, nothing charged.
		{"cancelled late, all rebooked", ChargeInput{Booking: cancelled(b, start.Add(-time.Hour)), RebookedMinutes: 120}, pol(nil), nil},
		// [constructed] the booked-time rule ignores rebooking.
		{"late cancel, booked rule", ChargeInput{Booking: cancelled(b, start.Add(-time.Hour)), RebookedMinutes: 60},
			pol(func(p *BillingPolicy) { p.LateCancellation = LateCancelBooked }),
			[]lineWant{{ComponentLateCancellation, ChargeRuleLateCancellation, 120, 12000, 24000}}},
		// [practice] REFERENCE §3 / issue 7: a service booking that displaced someone: no
		// charge to the displaced, however late.
		{"displaced by service", ChargeInput{Booking: cancelled(b, start.Add(-time.Hour)), DisplacedByService: true}, pol(nil), nil},
		// [constructed] a facility that treats displacement as cancellation charges it as late.
		{"displaced, as cancellation", ChargeInput{Booking: cancelled(b, start.Add(-time.Hour)), DisplacedByService: true},
			pol(func(p *BillingPolicy) { p.Displaced = DisplacedAsCancellation }),
			[]lineWant{{ComponentLateCancellation, ChargeRuleLateCancellation, 120, 12000, 24000}}},
		// [constructed] service time itself is never charged.
		{"service", ChargeInput{Booking: booking("s", KindService, start, end)}, pol(nil), nil},
		// [constructed] overrun past the end makes used (08:50–11:20, 150 min) the greater.
		{"overrun", ChargeInput{Booking: b, Usages: []Usage{used(berlin(t, 10, 8, 50), berlin(t, 10, 11, 20))}}, pol(nil),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleGreater, 150, 12000, 30000}}},
		// [constructed] overlapping usages count once: 09:00–10:00 and 09:30–10:10 = 70 min → 75.
		{"used basis", ChargeInput{Booking: b, Usages: []Usage{used(start, berlin(t, 10, 10, 0)), used(berlin(t, 10, 9, 30), berlin(t, 10, 10, 10))}},
			pol(func(p *BillingPolicy) { p.Basis = BasisUsed }),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleUsed, 75, 12000, 15000}}},
		// [constructed] used basis with 20 min used: raised to the 1 h minimum.
		{"used basis minimum", ChargeInput{Booking: b, Usages: []Usage{used(start, berlin(t, 10, 9, 20))}},
			pol(func(p *BillingPolicy) { p.Basis = BasisUsed }),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleMinimum, 60, 12000, 12000}}},
		// [constructed] booked basis ignores a long overrun.
		{"booked basis", ChargeInput{Booking: b, Usages: []Usage{used(start, berlin(t, 10, 13, 0))}},
			pol(func(p *BillingPolicy) { p.Basis = BasisBooked }),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleBooked, 120, 12000, 24000}}},
		// [constructed] an open usage runs to now (11:30 here): 150 min.
		{"open usage", ChargeInput{Booking: b, Usages: []Usage{{StartedAt: start}}, Now: berlin(t, 10, 11, 30)}, pol(nil),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleGreater, 150, 12000, 30000}}},
		// [constructed] training adds staff time by default; an override of [] drops it.
		{"training without staff time", ChargeInput{Booking: booking("t", KindTraining, start, end)},
			refPolicy().With(BillingPolicyOverride{StaffTimeKinds: []BookingKind{}}),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleGreater, 120, 12000, 24000}}},
		// [constructed] an unattended night under the cap is charged in full: 6 h × 60 = 360.
		{"unattended under cap", ChargeInput{Booking: booking("u", KindUnattended, berlin(t, 10, 20, 0), berlin(t, 11, 2, 0))}, pol(nil),
			[]lineWant{{ComponentInstrumentTime, ChargeRuleGreater, 360, 6000, 36000}}},
		// [constructed] a no-show on an unattended night is capped like the night itself.
		{"unattended no-show capped", ChargeInput{Booking: booking("u", KindUnattended, berlin(t, 10, 18, 0), berlin(t, 11, 8, 0)), NoShow: true}, pol(nil),
			[]lineWant{{ComponentNoShow, ChargeRuleUnattendedCap, 840, 6000, 40000}}},
	} {
		c.in.RateClass = accounts.RateInternal
		if c.in.Now.IsZero() {
			c.in.Now = now
		}
		if err := c.p.Validate(); err != nil {
			t.Fatalf("%s: policy: %v", c.name, err)
		}
		lines, err := ComputeCharges(c.in, []RateSchedule{refSchedule()}, c.p)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		checkLines(t, c.name, lines, c.want)
	}
}

func TestComputeChargesRounding(t *testing.T) {
	start := berlin(t, 12, 9, 0)
	// A line of 75 min: the 1 h minimum does not apply, and minutes × rate ÷ 60 has a
	// fraction of a cent that the rule rounds half up.
	for _, c := range []struct {
		rate, want int64
	}{
		{10002, 12503}, // [computed] 75 × 10002 ÷ 60 = 12502.5 → half up → 12503
		{10001, 12501}, // [computed] 75 × 10001 ÷ 60 = 12501.25 → 12501
		{10003, 12504}, // [computed] 75 × 10003 ÷ 60 = 12503.75 → 12504
	} {
		s := refSchedule()
		s.Classes[0].IndependentHourlyMinor = c.rate
		in := ChargeInput{Booking: booking("r", KindIndependent, start, start.Add(75*time.Minute)), RateClass: accounts.RateInternal}
		lines, err := ComputeCharges(in, []RateSchedule{s}, refPolicy())
		if err != nil {
			t.Fatal(err)
		}
		if len(lines) != 1 || lines[0].Minutes != 75 || lines[0].AmountMinor != c.want {
			t.Errorf("rate %d: %+v, want 75 min = %d", c.rate, lines, c.want)
		}
	}
}

func TestComputeChargesErrors(t *testing.T) {
	start := berlin(t, 12, 9, 0)
	b := booking("e", KindIndependent, start, start.Add(time.Hour))
	for _, c := range []struct {
		name      string
		in        ChargeInput
		schedules []RateSchedule
		kind      error
		rule      string
		field     string
	}{
		{"no schedule yet", ChargeInput{Booking: booking("e", KindIndependent, refSince.Add(-time.Hour), refSince.Add(time.Hour)), RateClass: accounts.RateInternal},
			[]RateSchedule{refSchedule()}, beamledger.ErrRule, "rate_schedule_in_force", ""},
		{"class missing", ChargeInput{Booking: b, RateClass: accounts.RateCommercial}, []RateSchedule{refSchedule()}, beamledger.ErrRule, "rate_class_in_schedule", ""},
		{"bad class", ChargeInput{Booking: b, RateClass: "friends"}, []RateSchedule{refSchedule()}, beamledger.ErrInvalid, "", "rate_class"},
		{"cancelled without instant", ChargeInput{Booking: Booking{Kind: KindIndependent, Start: start, End: start.Add(time.Hour), Status: StatusCancelled}, RateClass: accounts.RateInternal},
			[]RateSchedule{refSchedule()}, beamledger.ErrInvalid, "", "cancelled_at"},
		{"backwards range", ChargeInput{Booking: booking("e", KindIndependent, start, start), RateClass: accounts.RateInternal}, nil, beamledger.ErrInvalid, "", "end"},
		{"negative rebooked", ChargeInput{Booking: b, RateClass: accounts.RateInternal, RebookedMinutes: -1}, nil, beamledger.ErrInvalid, "", "rebooked_minutes"},
		{"open usage without now", ChargeInput{Booking: b, RateClass: accounts.RateInternal, Usages: []Usage{{StartedAt: start}}}, nil, beamledger.ErrInvalid, "", "now"},
		{"usage ends before it starts", ChargeInput{Booking: b, RateClass: accounts.RateInternal, Usages: []Usage{used(start, start.Add(-time.Minute))}}, nil, beamledger.ErrInvalid, "", "usages[0].ended_at"},
		{"twin schedules", ChargeInput{Booking: b, RateClass: accounts.RateInternal}, []RateSchedule{refSchedule(), refSchedule()}, beamledger.ErrInvalid, "", "effective_from"},
	} {
		_, err := ComputeCharges(c.in, c.schedules, refPolicy())
		var e *beamledger.Error
		if !errors.Is(err, c.kind) || !errors.As(err, &e) {
			t.Errorf("%s: %v, want %v", c.name, err, c.kind)
			continue
		}
		if e.Rule != c.rule {
			t.Errorf("%s: rule %q, want %q", c.name, e.Rule, c.rule)
		}
		if _, ok := e.Fields[c.field]; c.field != "" && !ok {
			t.Errorf("%s: fields %v, want %q", c.name, e.Fields, c.field)
		}
	}
}

func TestIsNoShow(t *testing.T) {
	start := berlin(t, 12, 9, 0)
	p := DefaultBillingPolicy()
	for _, c := range []struct {
		name   string
		usages []Usage
		now    time.Time
		want   bool
	}{
		// [practice] REFERENCE §3: a no-show is no usage within 30 min of the start.
		{"grace not over", nil, start.Add(29 * time.Minute), false},
		{"grace over, nobody", nil, start.Add(30 * time.Minute), true},
		{"came at 09:29", []Usage{{StartedAt: start.Add(29 * time.Minute)}}, start.Add(time.Hour), false},
		{"came at 09:30", []Usage{{StartedAt: start.Add(30 * time.Minute)}}, start.Add(time.Hour), true},
		{"came early", []Usage{{StartedAt: start.Add(-time.Hour)}}, start.Add(time.Hour), false},
	} {
		if got := p.IsNoShow(start, c.usages, c.now); got != c.want {
			t.Errorf("%s: %v, want %v", c.name, got, c.want)
		}
	}
}

// TestChargeProperties checks, over random bookings and usage, that charges are never
// negative and that working longer never lowers a booking's charge, under the default
// policy, with and without a rate change and the unattended cap.
func TestChargeProperties(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	base := time.Date(2026, 5, 4, 6, 0, 0, 0, time.UTC)
	change := refSchedule()
	change.ID, change.EffectiveFrom = "rs-2", base.Add(5*time.Hour)
	change.Classes = []ClassRates{{RateClass: accounts.RateInternal, IndependentHourlyMinor: 9999, AssistedHourlyMinor: 13333,
		TrainingHourlyMinor: 7001, UnattendedHourlyMinor: 4567, StaffHourlyMinor: 8001}}
	kinds := []BookingKind{KindIndependent, KindAssisted, KindTraining, KindUnattended}
	total := func(in ChargeInput, p BillingPolicy) int64 {
		lines, err := ComputeCharges(in, []RateSchedule{refSchedule(), change}, p)
		if err != nil {
			t.Fatalf("%+v: %v", in, err)
		}
		for _, l := range lines {
			if l.AmountMinor < 0 || l.Minutes < 0 {
				t.Fatalf("negative line %+v for %+v", l, in)
			}
		}
		return sumAmounts(lines)
	}
	for i := 0; i < 5000; i++ {
		start := base.Add(time.Duration(rng.IntN(10*60)) * time.Minute)
		b := booking("p", kinds[rng.IntN(len(kinds))], start, start.Add(time.Duration(1+rng.IntN(16*60))*time.Minute))
		p := refPolicy()
		p.Basis = []BillingBasis{BasisBooked, BasisUsed, BasisGreater}[rng.IntN(3)]
		p.IncrementMinutes = []int{1, 5, 15, 60}[rng.IntN(4)]
		if rng.IntN(2) == 0 {
			p.UnattendedCapMinor = 0
		}
		from := start.Add(time.Duration(rng.IntN(120)-60) * time.Minute)
		to := from.Add(time.Duration(rng.IntN(18*60*60)) * time.Second)
		in := ChargeInput{Booking: b, RateClass: accounts.RateInternal, Usages: []Usage{used(from, to)}}
		before := total(in, p)
		in.Usages = []Usage{used(from, to.Add(time.Duration(1+rng.IntN(3*60*60))*time.Second))}
		if after := total(in, p); after < before {
			t.Fatalf("working longer lowered the charge from %d to %d: %+v under %+v", before, after, in, p)
		}
	}
}
