package scheduling

import (
	"reflect"
	"testing"
	"time"
)

// TestSumUtilizationRules takes one booking at a time through the report's rules.
// Every expected value is [constructed]: worked by hand from the rule beside it.
func TestSumUtilizationRules(t *testing.T) {
	from := time.Date(2031, 3, 3, 0, 0, 0, 0, time.UTC) // a Monday
	to := from.AddDate(0, 0, 7)
	at := func(day, h, m, s int) time.Time {
		return from.Add(time.Duration(day)*24*time.Hour + time.Duration(h)*time.Hour + time.Duration(m)*time.Minute + time.Duration(s)*time.Second)
	}
	ptr := func(v time.Time) *time.Time { return &v }
	now := at(2, 12, 0, 0)
	used := func(s, e time.Time) Usage { return Usage{StartedAt: s, EndedAt: ptr(e)} }
	booking := func(s, e time.Time) UtilizationBooking {
		return UtilizationBooking{ProjectID: "P", Kind: KindIndependent, Start: s, End: e, Status: StatusActive}
	}
	cancelled := func(b UtilizationBooking, at time.Time, displaced bool) UtilizationBooking {
		b.Status, b.CancelledAt, b.Displaced = StatusCancelled, &at, displaced
		return b
	}
	noShow := func(b UtilizationBooking) UtilizationBooking { b.NoShow = true; return b }
	withUsage := func(b UtilizationBooking, u ...Usage) UtilizationBooking { b.Usages = u; return b }
	h := time.Hour
	tests := []struct {
		name    string
		booking UtilizationBooking
		want    UtilizationTotals // ProjectID and Kind are filled in
		service []Interval
	}{
		{"used inside", withUsage(booking(at(0, 9, 0, 0), at(0, 11, 0, 0)), used(at(0, 9, 5, 0), at(0, 10, 50, 0))),
			UtilizationTotals{Booked: 2 * h, Used: h + 45*time.Minute}, nil},
		// Used time outside the booked range (an overrun) still counts: it is use.
		{"overrun", withUsage(booking(at(0, 9, 0, 0), at(0, 10, 0, 0)), used(at(0, 8, 50, 0), at(0, 10, 20, 0))),
			UtilizationTotals{Booked: h, Used: h + 30*time.Minute}, nil},
		// Back-to-back usages are one span: 30 min 30 s + 29 min 30 s = 60 min.
		{"back to back", withUsage(booking(at(0, 9, 0, 0), at(0, 10, 0, 0)), used(at(0, 9, 0, 0), at(0, 9, 30, 30)), used(at(0, 9, 30, 30), at(0, 10, 0, 0))),
			UtilizationTotals{Booked: h, Used: h}, nil},
		// An open usage counts until now (day 2, 12:00): 1 h 30 min.
		{"in use", withUsage(booking(at(2, 10, 0, 0), at(2, 14, 0, 0)), Usage{StartedAt: at(2, 10, 30, 0)}),
			UtilizationTotals{Booked: 4 * h, Used: h + 30*time.Minute}, nil},
		{"checked in after now", withUsage(booking(at(2, 13, 0, 0), at(2, 14, 0, 0)), Usage{StartedAt: at(2, 13, 0, 0)}),
			UtilizationTotals{Booked: h}, nil},
		// Clipped to the range: the booking began 30 min before it, the usage 45 min.
		{"across the start", withUsage(booking(at(-1, 23, 30, 0), at(0, 1, 0, 0)), used(at(-1, 23, 15, 0), at(0, 0, 20, 0))),
			UtilizationTotals{Booked: h, Used: 20 * time.Minute}, nil},
		{"no-show", noShow(booking(at(1, 9, 0, 0), at(1, 12, 0, 0))),
			UtilizationTotals{Booked: 3 * h, NoShow: 3 * h}, nil},
		// Marked a no-show, then used after all: use, not a no-show.
		{"no-show used later", noShow(withUsage(booking(at(1, 9, 0, 0), at(1, 12, 0, 0)), used(at(1, 10, 0, 0), at(1, 11, 0, 0)))),
			UtilizationTotals{Booked: 3 * h, Used: h}, nil},
		// Window 24 h: cancelled 10 h before the start is late, 30 h before is not.
		{"cancelled late", cancelled(booking(at(1, 9, 0, 0), at(1, 13, 0, 0)), at(0, 23, 0, 0), false),
			UtilizationTotals{CancelledLate: 4 * h}, nil},
		{"cancelled in time", cancelled(booking(at(3, 9, 0, 0), at(3, 13, 0, 0)), at(2, 3, 0, 0), false),
			UtilizationTotals{}, nil},
		{"displaced by service", cancelled(booking(at(1, 9, 0, 0), at(1, 13, 0, 0)), at(1, 8, 0, 0), true),
			UtilizationTotals{}, nil},
		// A usage recorded before the booking was cancelled is not use of a booking.
		{"cancelled after use", cancelled(withUsage(booking(at(1, 9, 0, 0), at(1, 13, 0, 0)), used(at(1, 9, 0, 0), at(1, 9, 10, 0))), at(1, 9, 15, 0), false),
			UtilizationTotals{CancelledLate: 4 * h}, nil},
		{"service", UtilizationBooking{Kind: KindService, Start: at(6, 20, 0, 0), End: at(7, 4, 0, 0), Status: StatusActive},
			UtilizationTotals{}, []Interval{{Start: at(6, 20, 0, 0), End: to}}},
	}
	for _, tt := range tests {
		got := SumUtilization(from, to, 24*h, []UtilizationBooking{tt.booking}, now)
		var want UtilizationSums
		if tt.booking.Kind != KindService {
			w := tt.want
			w.ProjectID, w.Kind = "P", KindIndependent
			want.Totals = []UtilizationTotals{w}
		}
		want.Service = tt.service
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: %+v, want %+v", tt.name, got, want)
		}
	}
}

// TestUtilizationReport builds a week's report from sums: whole minutes rounded down
// once per figure, service time taken off the opening hours only where they meet,
// and a weekly quota prorated.
func TestUtilizationReport(t *testing.T) {
	from := time.Date(2031, 3, 3, 0, 0, 0, 0, time.UTC) // a Monday
	to := from.AddDate(0, 0, 7)
	opening := []ClockWindow{{Days: []time.Weekday{1, 2, 3, 4, 5}, Start: "08:00", End: "18:00"}}
	half := 30 * time.Second
	sums := UtilizationSums{
		Totals: []UtilizationTotals{
			{ProjectID: "A", Kind: KindIndependent, Booked: 10*time.Minute + half, Used: 10*time.Minute + half},
			{ProjectID: "A", Kind: KindAssisted, Booked: 10*time.Minute + half, NoShow: 10*time.Minute + half},
			{ProjectID: "B", Kind: KindIndependent, Booked: 3 * time.Hour, CancelledLate: time.Hour},
		},
		// Tuesday 17:00 to Wednesday 09:00 and Wednesday 08:30 to 10:00 overlap; inside
		// the opening hours they take Tuesday 17–18 and Wednesday 8–10: 180 min.
		Service: []Interval{
			{Start: from.Add(24*time.Hour + 17*time.Hour), End: from.Add(2*24*time.Hour + 9*time.Hour)},
			{Start: from.Add(2*24*time.Hour + 8*time.Hour + 30*time.Minute), End: from.Add(2*24*time.Hour + 10*time.Hour)},
		},
	}
	quotas := []Quota{{ProjectID: "B", InstrumentID: "I", Period: PeriodWeek, AllocatedMinutes: 600}}
	r := Utilization("I", from, to, time.UTC, opening, sums, quotas)
	// [constructed] 5 days × 10 h = 3 000 min open; 180 min service; 2 820 available;
	// uptime 2 820 / 3 000 = 940 ‰.
	if r.OpeningMinutes != 3000 || r.ServiceMinutes != 180 || r.AvailableMinutes != 2820 || r.UptimePermille != 940 {
		t.Errorf("opening %d, service %d, available %d, uptime %d ‰", r.OpeningMinutes, r.ServiceMinutes, r.AvailableMinutes, r.UptimePermille)
	}
	// [constructed] booked 10.5 + 10.5 + 180 = 201 min (the halves add to a minute,
	// rounded once); 201 / 2 820 = 71 ‰.
	want := UtilizationFigures{BookedMinutes: 201, UsedMinutes: 10, NoShowMinutes: 10, CancelledLateMinutes: 60}
	if r.UtilizationFigures != want || r.BookedPermille != 71 {
		t.Errorf("figures %+v, booked %d ‰; want %+v and 71 ‰", r.UtilizationFigures, r.BookedPermille, want)
	}
	// [constructed] per kind: independent 10.5 + 180 = 190.5 → 190; assisted 10.5 → 10.
	if len(r.ByKind) != 2 || r.ByKind[0].Kind != KindIndependent || r.ByKind[0].BookedMinutes != 190 ||
		r.ByKind[1].Kind != KindAssisted || r.ByKind[1].BookedMinutes != 10 {
		t.Errorf("by kind %+v", r.ByKind)
	}
	// [constructed] A: 21 min booked; B: 180 booked, its weekly 600 min quota whole
	// over a week, nothing used: 0 ‰.
	if len(r.ByProject) != 2 || r.ByProject[0].BookedMinutes != 21 || r.ByProject[0].QuotaMinutes != nil ||
		r.ByProject[1].QuotaMinutes == nil || *r.ByProject[1].QuotaMinutes != 600 || *r.ByProject[1].QuotaUsedPermille != 0 {
		t.Errorf("by project %+v", r.ByProject)
	}
}
