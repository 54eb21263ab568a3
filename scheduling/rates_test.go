package scheduling

import (
	"errors"
	"reflect"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
)

func TestSchedulePieces(t *testing.T) {
	at := func(d, h int) time.Time { return time.Date(2026, 4, d, h, 0, 0, 0, time.UTC) }
	s := func(id, inst string, from time.Time) RateSchedule {
		return RateSchedule{ID: id, InstrumentID: inst, EffectiveFrom: from, Currency: "EUR"}
	}
	all := []RateSchedule{s("c", "tem-1", at(3, 0)), s("a", "tem-1", at(1, 0)), s("x", "sem-1", at(2, 0)), s("b", "tem-1", at(2, 12))}
	// [constructed] a range from 1 April 06:00 to 3 April 06:00 crosses the changes at
	// 2 April 12:00 and 3 April 00:00 and not the other instrument's.
	pieces, err := SchedulePieces(all, "tem-1", at(1, 6), at(3, 6))
	if err != nil {
		t.Fatal(err)
	}
	want := []struct {
		id         string
		start, end time.Time
	}{{"a", at(1, 6), at(2, 12)}, {"b", at(2, 12), at(3, 0)}, {"c", at(3, 0), at(3, 6)}}
	if len(pieces) != len(want) {
		t.Fatalf("%d pieces %+v, want %d", len(pieces), pieces, len(want))
	}
	for i, w := range want {
		if p := pieces[i]; p.Schedule.ID != w.id || !p.Start.Equal(w.start) || !p.End.Equal(w.end) {
			t.Errorf("piece %d: %s [%s, %s), want %s [%s, %s)", i, p.Schedule.ID, p.Start, p.End, w.id, w.start, w.end)
		}
	}
	// [constructed] a range wholly inside one schedule is one piece; the last schedule
	// stays in force indefinitely.
	if pieces, err := SchedulePieces(all, "tem-1", at(20, 0), at(21, 0)); err != nil || len(pieces) != 1 || pieces[0].Schedule.ID != "c" {
		t.Errorf("late range: %+v %v", pieces, err)
	}
	// [constructed] a range that ends exactly at a change does not touch the next schedule.
	if pieces, err := SchedulePieces(all, "tem-1", at(2, 0), at(2, 12)); err != nil || len(pieces) != 1 || pieces[0].Schedule.ID != "a" {
		t.Errorf("range ending at a change: %+v %v", pieces, err)
	}
	// [constructed] before the first schedule nothing is in force.
	_, err = SchedulePieces(all, "tem-1", at(0, 23), at(1, 6))
	var e *beamledger.Error
	if !errors.As(err, &e) || e.Rule != "rate_schedule_in_force" {
		t.Errorf("before first schedule: %v", err)
	}
	if _, err := SchedulePieces(all, "fib-1", at(5, 0), at(5, 1)); !errors.Is(err, beamledger.ErrRule) {
		t.Errorf("instrument without schedules: %v", err)
	}
	if p, err := SchedulePieces(all, "tem-1", at(5, 0), at(5, 0)); err != nil || p != nil {
		t.Errorf("empty range: %+v %v", p, err)
	}
	// The instrument's own schedules already in order, as a statement passes them,
	// give the same pieces; two of them at one instant are still refused.
	own := []RateSchedule{all[1], all[3], all[0]}
	if again, err := SchedulePieces(own, "tem-1", at(1, 6), at(3, 6)); err != nil || !reflect.DeepEqual(again, pieces) {
		t.Errorf("from the instrument's own schedules in order: %+v %v, want %+v", again, err, pieces)
	}
	twice := []RateSchedule{all[1], s("a2", "tem-1", at(1, 0)), all[3]}
	if _, err := SchedulePieces(twice, "tem-1", at(1, 6), at(3, 6)); !errors.Is(err, beamledger.ErrInvalid) {
		t.Errorf("two schedules at one instant: %v", err)
	}
}

func TestRateScheduleValidate(t *testing.T) {
	if err := refSchedule().Validate(); err != nil {
		t.Fatalf("reference schedule: %v", err)
	}
	bad := refSchedule()
	bad.InstrumentID, bad.Currency, bad.EffectiveFrom = " ", "euro", time.Time{}
	over := refRates(accounts.RateInternal)
	over.StaffHourlyMinor = maxHourlyRateMinor + 1
	neg := refRates("friends")
	neg.UnattendedHourlyMinor = -1
	bad.Classes = []ClassRates{refRates(accounts.RateInternal), over, neg}
	err := bad.Validate()
	var e *beamledger.Error
	if !errors.As(err, &e) || !errors.Is(err, beamledger.ErrInvalid) {
		t.Fatalf("want ErrInvalid, got %v", err)
	}
	for _, f := range []string{"instrument_id", "currency", "effective_from", "classes[1].rate_class",
		"classes[1].staff_hourly_minor", "classes[2].rate_class", "classes[2].unattended_hourly_minor"} {
		if _, ok := e.Fields[f]; !ok {
			t.Errorf("no error for %s in %v", f, e.Fields)
		}
	}
	if _, ok := e.Fields["classes[0].rate_class"]; ok {
		t.Errorf("first class refused: %v", e.Fields)
	}
	empty := refSchedule()
	empty.Classes = nil
	if err := empty.Validate(); !errors.As(err, &e) || e.Fields["classes"] == "" {
		t.Errorf("no classes: %v", err)
	}
}

func TestBillingPolicyDefaultsAndOverride(t *testing.T) {
	p := DefaultBillingPolicy()
	if err := p.Validate(); err != nil {
		t.Fatalf("default: %v", err)
	}
	// [practice] REFERENCE §3, the project's default policy, item by item.
	if p.Basis != BasisGreater || p.IncrementMinutes != 15 || p.MinimumMinutes != 60 ||
		p.CancellationWindowMinutes != 24*60 || p.LateCancellation != LateCancelBookedLessRebooked ||
		p.NoShowGraceMinutes != 30 || p.NoShow != NoShowBooked || p.Displaced != DisplacedNoCharge {
		t.Errorf("default policy %+v differs from REFERENCE §3", p)
	}
	if p.NoShowGraceMinutes != DefaultRules().NoShowGraceMinutes {
		t.Errorf("billing grace %d, booking rules grace %d", p.NoShowGraceMinutes, DefaultRules().NoShowGraceMinutes)
	}
	basis, inc, capMinor := BasisUsed, 6, int64(25000)
	q := p.With(BillingPolicyOverride{Basis: &basis, IncrementMinutes: &inc, UnattendedCapMinor: &capMinor})
	if q.Basis != BasisUsed || q.IncrementMinutes != 6 || q.UnattendedCapMinor != 25000 || q.MinimumMinutes != 60 {
		t.Errorf("override: %+v", q)
	}
	q.StaffTimeKinds[0] = KindService
	if p.StaffTimeKinds[0] != KindAssisted {
		t.Error("With shares StaffTimeKinds with the facility policy")
	}
	if r := p.With(BillingPolicyOverride{}); len(r.StaffTimeKinds) != 2 {
		t.Errorf("nil StaffTimeKinds should inherit, got %v", r.StaffTimeKinds)
	}
}

func TestBillingPolicyValidate(t *testing.T) {
	p := DefaultBillingPolicy()
	p.Basis, p.IncrementMinutes, p.MinimumMinutes = "whatever", 0, -1
	p.CancellationWindowMinutes, p.LateCancellation, p.NoShowGraceMinutes = -5, "maybe", 2000
	p.NoShow, p.UnattendedCapMinor, p.Displaced, p.MonthlyCapMinor = "half", -1, "ignore", maxAmountMinor+1
	p.StaffTimeKinds = []BookingKind{KindAssisted, KindUnattended}
	err := p.Validate()
	var e *beamledger.Error
	if !errors.As(err, &e) {
		t.Fatalf("want field errors, got %v", err)
	}
	for _, f := range []string{"basis", "increment_minutes", "minimum_minutes", "cancellation_window_minutes",
		"late_cancellation", "no_show_grace_minutes", "no_show", "unattended_cap_minor", "staff_time_kinds",
		"displaced", "monthly_cap_minor"} {
		if _, ok := e.Fields[f]; !ok {
			t.Errorf("no error for %s in %v", f, e.Fields)
		}
	}
	p = DefaultBillingPolicy()
	p.StaffTimeKinds = []BookingKind{KindAssisted, KindAssisted}
	if err := p.Validate(); !errors.As(err, &e) || e.Fields["staff_time_kinds"] == "" {
		t.Errorf("duplicate staff kind: %v", err)
	}
}
