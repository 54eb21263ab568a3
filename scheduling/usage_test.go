package scheduling

import (
	"testing"
	"time"

	"beamledger"
)

func TestUsageOverrun(t *testing.T) {
	at := func(h, m int) time.Time { return time.Date(2026, 12, 8, h, m, 0, 0, time.UTC) }
	ptr := func(t time.Time) *time.Time { return &t }
	start, end, now := at(9, 0), at(11, 0), at(12, 0)
	// [constructed] a 09:00–11:00 booking against usages of every shape.
	for _, c := range []struct {
		name string
		u    Usage
		want time.Duration
	}{
		{"inside", Usage{StartedAt: at(9, 10), EndedAt: ptr(at(10, 50))}, 0},
		{"early start", Usage{StartedAt: at(8, 50), EndedAt: ptr(at(10, 0))}, 10 * time.Minute},
		{"late end", Usage{StartedAt: at(9, 0), EndedAt: ptr(at(11, 15))}, 15 * time.Minute},
		{"both sides", Usage{StartedAt: at(8, 50), EndedAt: ptr(at(11, 15))}, 25 * time.Minute},
		{"wholly before", Usage{StartedAt: at(7, 0), EndedAt: ptr(at(8, 0))}, time.Hour},
		{"wholly after", Usage{StartedAt: at(11, 30), EndedAt: ptr(at(11, 45))}, 15 * time.Minute},
		{"still open", Usage{StartedAt: at(10, 0)}, time.Hour},
	} {
		if got := c.u.Overrun(start, end, now); got != c.want {
			t.Errorf("%s: overrun %s, want %s", c.name, got, c.want)
		}
	}
}

func TestCheckInWindow(t *testing.T) {
	start := time.Date(2026, 12, 7, 9, 0, 0, 0, time.UTC)
	end := start.Add(3 * time.Hour)
	for _, c := range []struct {
		at time.Time
		ok bool
	}{
		{start.Add(-2 * time.Hour), true}, // the earliest: setting up
		{start.Add(-2*time.Hour - time.Second), false},
		{start, true},
		{end.Add(-time.Second), true},
		{end, false}, // the booking is over: [start, end) is half-open
		{start.AddDate(0, 0, -7), false},
	} {
		err := CheckInWindow(start, end, c.at)
		if (err == nil) != c.ok {
			t.Errorf("check-in at %s: %v, want allowed %v", c.at.Format(time.RFC3339), err, c.ok)
		}
		if err != nil && beamledger.FieldReason(err) == "" {
			t.Errorf("refusal names no field: %v", err)
		}
	}
}
