package scheduling

import (
	"errors"
	"testing"
	"time"

	"beamledger"
)

// FuzzParseInstant feeds booking times as a client might send them. Whatever the
// input, ParseInstant answers without panicking, and either refuses it as invalid
// input naming the field or gives an instant that reads back: an instant with an
// offset is the one time.Parse reads, and a wall time resolves to a UTC instant in
// the zone whose local clock shows that wall time (or, in a DST gap, shifted by the
// gap as RFC 5545 §3.3.5 asks).
func FuzzParseInstant(f *testing.F) {
	for _, s := range []string{"2024-11-03T01:30", "2024-03-31T02:30", "2024-11-03T05:30:00Z", "2024-11-03T01:30:00-04:00",
		"2024-11-03T01:30:00.123456789+05:45", "0001-01-01T00:00", "9999-12-31T23:59:59Z", "2024-02-30T10:00", "", "T", "2024-11-03T25:00"} {
		f.Add(s)
	}
	loc, err := time.LoadLocation("America/New_York")
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, s string) {
		got, res, err := ParseInstant("start", s, loc)
		if err != nil {
			var de *beamledger.Error
			if !errors.Is(err, beamledger.ErrInvalid) || !errors.As(err, &de) || de.Fields["start"] == "" {
				t.Fatalf("ParseInstant(%q): %v is not an invalid-input error naming start", s, err)
			}
			return
		}
		if got.Location() != time.UTC {
			t.Fatalf("ParseInstant(%q) = %v, not in UTC", s, got)
		}
		if res == ResolutionGap {
			return
		}
		if want, perr := time.Parse(time.RFC3339Nano, s); perr == nil && !want.Equal(got) {
			t.Fatalf("ParseInstant(%q) = %v; time.Parse reads %v", s, got, want)
		}
		if w, werr := ParseWall(s); werr == nil && WallAt(got, loc) != w {
			t.Fatalf("ParseInstant(%q) = %v, which shows %v in New York", s, got, WallAt(got, loc))
		}
	})
}

// FuzzExpand feeds recurrence rules as a client might send them. Whatever the rule,
// Expand answers without panicking, refuses with invalid input naming a field, or
// returns at most the allowed number of bookings, in order, each as long as asked
// and none on a local time that does not exist.
func FuzzExpand(f *testing.F) {
	for _, r := range []string{"FREQ=WEEKLY;COUNT=10;BYDAY=TU", "RRULE:FREQ=DAILY;UNTIL=20250105T000000Z", "FREQ=DAILY;BYHOUR=2;COUNT=400",
		"FREQ=MONTHLY;BYMONTHDAY=31;COUNT=12", "FREQ=YEARLY;BYMONTH=2;BYMONTHDAY=29;COUNT=3", "FREQ=MINUTELY", "FREQ=WEEKLY;INTERVAL=0",
		"FREQ=DAILY;INTERVAL=999;COUNT=2", ";;;", "FREQ=WEEKLY;BYDAY=MO,WE,FR;UNTIL=20250301T120000", ""} {
		f.Add(r, int64(2*time.Hour))
	}
	loc, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		f.Fatal(err)
	}
	start := Wall{Year: 2025, Month: time.January, Day: 7, Hour: 2, Minute: 30}
	horizon := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	const most = 200
	f.Fuzz(func(t *testing.T, rule string, d int64) {
		occ, err := Expand(SeriesSpec{RRule: rule, Start: start, Duration: time.Duration(d)}, loc, horizon, most)
		if err != nil {
			if !errors.Is(err, beamledger.ErrInvalid) {
				t.Fatalf("Expand(%q, %v): %v is not invalid input", rule, time.Duration(d), err)
			}
			return
		}
		if len(occ) > most {
			t.Fatalf("Expand(%q): %d bookings, more than %d", rule, len(occ), most)
		}
		for i, o := range occ {
			if o.End.Sub(o.Start) != time.Duration(d) || o.Resolution == ResolutionGap || !WallExists(o.Wall, loc) {
				t.Fatalf("Expand(%q): booking %d %+v", rule, i, o)
			}
			if i > 0 && !o.Start.After(occ[i-1].Start) {
				t.Fatalf("Expand(%q): booking %d starts at %v, not after %v", rule, i, o.Start, occ[i-1].Start)
			}
		}
	})
}
