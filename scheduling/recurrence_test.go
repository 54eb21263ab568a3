package scheduling

import (
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"beamledger"
)

// expand runs Expand in New York unless zone says otherwise, and returns each start as
// RFC 3339 on the local clock, so one string checks the date, the wall time and the
// offset (EDT -04:00, EST -05:00).
func expand(t *testing.T, zone, rule, start string, horizon time.Time, max int) ([]Occurrence, []string) {
	t.Helper()
	loc := mustZone(t, zone)
	occ, err := Expand(SeriesSpec{RRule: rule, Start: mustWall(t, start), Duration: time.Hour}, loc, horizon, max)
	if err != nil {
		t.Fatalf("Expand(%q from %s): %v", rule, start, err)
	}
	out := make([]string, len(occ))
	for i, o := range occ {
		out[i] = o.Start.In(loc).Format(time.RFC3339)
		if o.Start.Location() != time.UTC || o.End.Location() != time.UTC {
			t.Errorf("occurrence %d not in UTC", i)
		}
		if o.End.Sub(o.Start) != time.Hour {
			t.Errorf("occurrence %d lasts %s", i, o.End.Sub(o.Start))
		}
		if i > 0 && !o.Start.After(occ[i-1].Start) {
			t.Errorf("occurrence %d (%s) not after the one before", i, out[i])
		}
		if got := WallAt(o.Start, loc); got != o.Wall && o.Resolution != ResolutionGap {
			t.Errorf("occurrence %d: Wall %s but the clock shows %s", i, o.Wall, got)
		}
	}
	return occ, out
}

// at9 lists 09:00 on the given days of one month with one offset.
func at9(year int, month time.Month, offset string, days ...int) []string {
	var out []string
	for _, d := range days {
		out = append(out, fmt.Sprintf("%04d-%02d-%02dT09:00:00%s", year, month, d, offset))
	}
	return out
}

func seq(from, to, step int) []int {
	var out []int
	for d := from; d <= to; d += step {
		out = append(out, d)
	}
	return out
}

func join(parts ...[]string) []string {
	var out []string
	for _, p := range parts {
		out = append(out, p...)
	}
	return out
}

func sameList(t *testing.T, got, want []string) {
	t.Helper()
	if len(got) != len(want) {
		t.Errorf("got %d instances, want %d\n got  %v\n want %v", len(got), len(want), got, want)
		return
	}
	for i := range got {
		if got[i] != want[i] {
			t.Errorf("instance %d = %s, want %s", i, got[i], want[i])
		}
	}
}

const (
	edt = "-04:00"
	est = "-05:00"
)

// The RFC 5545 §3.8.5.3 examples, all with DTSTART;TZID=America/New_York. Each expected
// list is the RFC's own, with its EDT/EST annotations turned into offsets.
func TestExpandRFC5545Examples(t *testing.T) {
	far := mustUTC(t, "2100-01-01T00:00:00Z") // not used by bounded rules
	tests := []struct {
		name, rule, start string
		horizon           time.Time
		want              []string
	}{
		{
			// [published: RFC 5545 §3.8.5.3 "Daily for 10 occurrences"] (also REFERENCE.md §2)
			"daily count", "FREQ=DAILY;COUNT=10", "1997-09-02T09:00", far,
			at9(1997, 9, edt, seq(2, 11, 1)...),
		},
		{
			// [published: RFC 5545 §3.8.5.3 "Weekly for 10 occurrences"] (also REFERENCE.md §2)
			"weekly count", "FREQ=WEEKLY;COUNT=10", "1997-09-02T09:00", far,
			join(at9(1997, 9, edt, 2, 9, 16, 23, 30), at9(1997, 10, edt, 7, 14, 21),
				at9(1997, 10, est, 28), at9(1997, 11, est, 4)),
		},
		{
			// [published: RFC 5545 §3.8.5.3 "Monthly on the first Friday for 10 occurrences"]
			// (also REFERENCE.md §2); 1998 summer time began on 5 April, so 3 April is EST.
			"monthly first friday", "FREQ=MONTHLY;COUNT=10;BYDAY=1FR", "1997-09-05T09:00", far,
			join(at9(1997, 9, edt, 5), at9(1997, 10, edt, 3), at9(1997, 11, est, 7), at9(1997, 12, est, 5),
				at9(1998, 1, est, 2), at9(1998, 2, est, 6), at9(1998, 3, est, 6), at9(1998, 4, est, 3),
				at9(1998, 5, edt, 1), at9(1998, 6, edt, 5)),
		},
		{
			// [published: RFC 5545 §3.8.5.3 "Daily until December 24, 1997"]: EDT Sep 2–30,
			// Oct 1–25; EST Oct 26–31, Nov 1–30, Dec 1–23 (113 instances).
			"daily until", "FREQ=DAILY;UNTIL=19971224T000000Z", "1997-09-02T09:00", far,
			join(at9(1997, 9, edt, seq(2, 30, 1)...), at9(1997, 10, edt, seq(1, 25, 1)...),
				at9(1997, 10, est, seq(26, 31, 1)...), at9(1997, 11, est, seq(1, 30, 1)...),
				at9(1997, 12, est, seq(1, 23, 1)...)),
		},
		{
			// [published: RFC 5545 §3.8.5.3 "Every other day - forever"], cut by our horizon
			// at Nov 2 00:00 UTC [constructed].
			"every other day", "FREQ=DAILY;INTERVAL=2", "1997-09-02T09:00", mustUTC(t, "1997-11-02T00:00:00Z"),
			join(at9(1997, 9, edt, seq(2, 30, 2)...), at9(1997, 10, edt, seq(2, 24, 2)...),
				at9(1997, 10, est, 26, 28, 30), at9(1997, 11, est, 1)),
		},
		{
			// [published: RFC 5545 §3.8.5.3 "Weekly on Tuesday and Thursday for five weeks"]
			"tue thu until", "FREQ=WEEKLY;UNTIL=19971007T000000Z;WKST=SU;BYDAY=TU,TH", "1997-09-02T09:00", far,
			join(at9(1997, 9, edt, 2, 4, 9, 11, 16, 18, 23, 25, 30), at9(1997, 10, edt, 2)),
		},
		{
			// [published: RFC 5545 §3.8.5.3, the same series written with COUNT]
			"tue thu count", "FREQ=WEEKLY;COUNT=10;WKST=SU;BYDAY=TU,TH", "1997-09-02T09:00", far,
			join(at9(1997, 9, edt, 2, 4, 9, 11, 16, 18, 23, 25, 30), at9(1997, 10, edt, 2)),
		},
		{
			// [published: RFC 5545 §3.8.5.3 "Monthly on the first and last day of the month
			// for 10 occurrences"]
			"first and last", "FREQ=MONTHLY;COUNT=10;BYMONTHDAY=1,-1", "1997-09-30T09:00", far,
			join(at9(1997, 9, edt, 30), at9(1997, 10, edt, 1), at9(1997, 10, est, 31), at9(1997, 11, est, 1, 30),
				at9(1997, 12, est, 1, 31), at9(1998, 1, est, 1, 31), at9(1998, 2, est, 1)),
		},
		{
			// [published: RFC 5545 §3.8.5.3 "An example where an invalid date (i.e.,
			// February 30) is ignored"]: EST Jan 15, 30, Feb 15; EDT Mar 15, 30.
			"february 30 ignored", "FREQ=MONTHLY;BYMONTHDAY=15,30;COUNT=5", "2007-01-15T09:00", far,
			join(at9(2007, 1, est, 15, 30), at9(2007, 2, est, 15), at9(2007, 3, edt, 15, 30)),
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, got := expand(t, "America/New_York", tc.rule, tc.start, tc.horizon, 500)
			sameList(t, got, tc.want) // source: see the comment on the case
		})
	}
}

func TestExpandDailyUntilCount(t *testing.T) {
	_, got := expand(t, "America/New_York", "FREQ=DAILY;UNTIL=19971224T000000Z", "1997-09-02T09:00", time.Time{}, 500)
	if len(got) != 113 || got[0] != "1997-09-02T09:00:00-04:00" || got[112] != "1997-12-23T09:00:00-05:00" { // [published: RFC 5545 §3.8.5.3]
		t.Errorf("%d instances from %s to %s", len(got), got[0], got[len(got)-1])
	}
}

// A daily 02:30 series across New York's 2007-03-11 spring-forward: that day's 02:30
// does not exist, so the instance is dropped and not counted [published: RFC 5545
// §3.3.10 "MUST be ignored and MUST NOT be counted"]; dates and offsets [computed].
func TestExpandDropsGapInstances(t *testing.T) {
	want := []string{
		"2007-03-09T02:30:00-05:00", "2007-03-10T02:30:00-05:00",
		"2007-03-12T02:30:00-04:00", "2007-03-13T02:30:00-04:00", "2007-03-14T02:30:00-04:00",
	}
	t.Run("count", func(t *testing.T) {
		occ, got := expand(t, "America/New_York", "FREQ=DAILY;COUNT=5", "2007-03-09T02:30", time.Time{}, 500)
		sameList(t, got, want) // COUNT=5 still gives 5 [published: RFC 5545 §3.3.10]
		for _, o := range occ {
			if o.Resolution != ResolutionExact || o.Wall.Hour != 2 || o.Wall.Minute != 30 {
				t.Errorf("%s: resolution %s, wall %s", o.Start, o.Resolution, o.Wall)
			}
		}
	})
	t.Run("until", func(t *testing.T) {
		_, got := expand(t, "America/New_York", "FREQ=DAILY;UNTIL=20070313T063000Z", "2007-03-09T02:30", time.Time{}, 500)
		sameList(t, got, want[:4]) // UNTIL inclusive: 2007-03-13 02:30 EDT is 06:30Z [published: RFC 5545 §3.3.10]
	})
	t.Run("horizon", func(t *testing.T) {
		_, got := expand(t, "America/New_York", "FREQ=DAILY", "2007-03-09T02:30", mustUTC(t, "2007-03-13T06:30:00Z"), 500)
		sameList(t, got, want[:3]) // horizon exclusive [constructed]
	})
	t.Run("hourly", func(t *testing.T) {
		_, got := expand(t, "America/New_York", "FREQ=HOURLY;COUNT=4", "2007-03-11T00:30", time.Time{}, 500)
		sameList(t, got, []string{ // 02:30 skipped, 03:30 follows 01:30 [computed]
			"2007-03-11T00:30:00-05:00", "2007-03-11T01:30:00-05:00",
			"2007-03-11T03:30:00-04:00", "2007-03-11T04:30:00-04:00",
		})
	})
}

// A daily 01:30 series across New York's 2024-11-03 fall-back takes the first 01:30
// [published: RFC 5545 §3.3.5]; offsets [computed].
func TestExpandOverlapTakesFirst(t *testing.T) {
	occ, got := expand(t, "America/New_York", "FREQ=DAILY;COUNT=3", "2024-11-02T01:30", time.Time{}, 500)
	sameList(t, got, []string{"2024-11-02T01:30:00-04:00", "2024-11-03T01:30:00-04:00", "2024-11-04T01:30:00-05:00"})
	if len(occ) != 3 {
		return
	}
	wantRes := []Resolution{ResolutionExact, ResolutionOverlap, ResolutionExact}
	for i, o := range occ {
		if o.Resolution != wantRes[i] {
			t.Errorf("instance %d resolution %s, want %s", i, o.Resolution, wantRes[i])
		}
	}
	if d := occ[2].Start.Sub(occ[1].Start); d != 25*time.Hour { // [computed] first 01:30 EDT to 01:30 EST
		t.Errorf("elapsed = %s, want 25h", d)
	}
}

// A weekly series keeps its wall time, so the elapsed time between bookings is one hour
// short or long across a change [computed: 7 × 24 h ∓ 1 h].
func TestExpandWeeklyKeepsWallTime(t *testing.T) {
	tests := []struct {
		zone, start string
		wantGaps    []time.Duration
	}{
		{"America/New_York", "2024-03-02T10:00", []time.Duration{168 * time.Hour, 167 * time.Hour, 168 * time.Hour}},
		{"America/New_York", "2024-10-26T10:00", []time.Duration{168 * time.Hour, 169 * time.Hour, 168 * time.Hour}},
		{"Australia/Sydney", "2024-09-29T10:00", []time.Duration{167 * time.Hour, 168 * time.Hour, 168 * time.Hour}},
		{"Australia/Lord_Howe", "2024-03-31T10:00", []time.Duration{168*time.Hour + 30*time.Minute, 168 * time.Hour, 168 * time.Hour}},
	}
	for _, tc := range tests {
		t.Run(tc.zone+"/"+tc.start, func(t *testing.T) {
			occ, _ := expand(t, tc.zone, "FREQ=WEEKLY;COUNT=4", tc.start, time.Time{}, 500)
			if len(occ) != 4 {
				t.Fatalf("%d instances", len(occ))
			}
			for i := 1; i < len(occ); i++ {
				if occ[i].Wall.Hour != 10 || occ[i].Wall.Minute != 0 {
					t.Errorf("instance %d wall %s", i, occ[i].Wall)
				}
				if d := occ[i].Start.Sub(occ[i-1].Start); d != tc.wantGaps[i-1] { // [computed]
					t.Errorf("gap %d = %s, want %s", i, d, tc.wantGaps[i-1])
				}
			}
		})
	}
}

func TestExpandUntilForms(t *testing.T) {
	far := time.Time{}
	tests := []struct {
		rule string
		n    int
	}{
		{"FREQ=DAILY;UNTIL=19970905T130000Z", 4}, // 09:00 EDT is 13:00Z; UNTIL inclusive [published: RFC 5545 §3.3.10]
		{"FREQ=DAILY;UNTIL=19970905T125959Z", 3}, // a second earlier [constructed]
		{"FREQ=DAILY;UNTIL=19970905T090000", 4},  // local UNTIL read in the facility zone [constructed]
		{"FREQ=DAILY;UNTIL=19970905T085959", 3},  // [constructed]
		{"FREQ=DAILY;UNTIL=19970902T130000Z", 1}, // UNTIL on the start [constructed]
		{"rrule:freq=daily;until=19970905t130000z", 4},
	}
	for _, tc := range tests {
		occ, _ := expand(t, "America/New_York", tc.rule, "1997-09-02T09:00", far, 500)
		if len(occ) != tc.n {
			t.Errorf("%s: %d instances, want %d", tc.rule, len(occ), tc.n)
		}
	}
}

// UNTIL and the horizon are instants; east of UTC the wall clock is ahead of them, and in
// an overlap a wall time's first occurrence can precede an UNTIL given as the second.
func TestExpandBoundsAreInstants(t *testing.T) {
	// Sydney 2024-07-01 09:00 AEST is 2024-06-30T23:00Z [memory: AEST +10:00].
	_, got := expand(t, "Australia/Sydney", "FREQ=DAILY;UNTIL=20240630T230000Z", "2024-06-28T09:00", time.Time{}, 500)
	sameList(t, got, []string{ // [computed]
		"2024-06-28T09:00:00+10:00", "2024-06-29T09:00:00+10:00", "2024-06-30T09:00:00+10:00", "2024-07-01T09:00:00+10:00",
	})
	_, got = expand(t, "Australia/Sydney", "FREQ=DAILY", "2024-06-28T09:00", mustUTC(t, "2024-06-30T23:00:01Z"), 500)
	if len(got) != 4 { // [computed]
		t.Errorf("horizon east of UTC: %v", got)
	}
	// UNTIL is 01:15 EST, the second 01:15 of 2024-11-03; the first 01:30 (EDT, 05:30Z)
	// comes before it and is kept [computed].
	occ, got := expand(t, "America/New_York", "FREQ=HOURLY;UNTIL=20241103T061500Z", "2024-11-02T23:30", time.Time{}, 500)
	sameList(t, got, []string{"2024-11-02T23:30:00-04:00", "2024-11-03T00:30:00-04:00", "2024-11-03T01:30:00-04:00"})
	if len(occ) == 3 && occ[2].Resolution != ResolutionOverlap {
		t.Errorf("01:30 resolution %s", occ[2].Resolution)
	}
}

func TestExpandDuration(t *testing.T) {
	ny := mustZone(t, "America/New_York")
	// A 2-hour booking from the first 01:00 on 2024-11-03 ends at 02:00 EST: elapsed time,
	// not wall time [computed].
	occ, err := Expand(SeriesSpec{RRule: "FREQ=DAILY;COUNT=1", Start: mustWall(t, "2024-11-03T01:00"), Duration: 2 * time.Hour}, ny, time.Time{}, 10)
	if err != nil || len(occ) != 1 {
		t.Fatalf("Expand: %v, %d", err, len(occ))
	}
	if got := occ[0].End.In(ny).Format(time.RFC3339); got != "2024-11-03T02:00:00-05:00" {
		t.Errorf("end = %s", got)
	}
}

func TestExpandLimits(t *testing.T) {
	ny := mustZone(t, "America/New_York")
	spec := func(rule string) SeriesSpec {
		return SeriesSpec{RRule: rule, Start: Wall{1997, time.September, 2, 9, 0, 0}, Duration: time.Hour}
	}
	if occ, err := Expand(spec("FREQ=DAILY;COUNT=10"), ny, time.Time{}, 10); err != nil || len(occ) != 10 {
		t.Errorf("COUNT equal to the limit: %d, %v", len(occ), err)
	}
	horizon := mustUTC(t, "1997-09-12T00:00:00Z") // ten days: Sep 2..11
	if occ, err := Expand(spec("FREQ=DAILY"), ny, horizon, 10); err != nil || len(occ) != 10 {
		t.Errorf("horizon at the limit: %d, %v", len(occ), err)
	}
	for _, tc := range []struct {
		rule    string
		horizon time.Time
	}{
		{"FREQ=DAILY;COUNT=11", time.Time{}},
		{"FREQ=DAILY;COUNT=1000000000", time.Time{}},
		{"FREQ=DAILY;UNTIL=20971224T000000Z", time.Time{}},
		{"FREQ=DAILY", horizon.Add(24 * time.Hour)},
	} {
		occ, err := Expand(spec(tc.rule), ny, tc.horizon, 10)
		if !isInvalid(err, "rrule") {
			t.Errorf("%s: %d instances, err %v; want refusal naming rrule", tc.rule, len(occ), err)
		}
	}
	if _, err := Expand(spec("FREQ=DAILY"), ny, time.Time{}, 10); err == nil || errors.Is(err, beamledger.ErrInvalid) {
		t.Errorf("unbounded rule with no horizon: %v, want a programming error", err)
	}
	if _, err := Expand(spec("FREQ=DAILY;COUNT=1"), nil, time.Time{}, 10); err == nil {
		t.Error("nil location accepted")
	}
	if _, err := Expand(spec("FREQ=DAILY;COUNT=1"), ny, time.Time{}, 0); err == nil {
		t.Error("maxInstances 0 accepted")
	}
	occ, err := Expand(spec("FREQ=DAILY"), ny, mustUTC(t, "1997-09-01T00:00:00Z"), 10)
	if err != nil || len(occ) != 0 {
		t.Errorf("horizon before the start: %d, %v", len(occ), err)
	}
}

func isInvalid(err error, field string) bool {
	var be *beamledger.Error
	if !errors.As(err, &be) || !errors.Is(err, beamledger.ErrInvalid) {
		return false
	}
	_, ok := be.Fields[field]
	return ok
}

func TestExpandRefusesBadInput(t *testing.T) {
	ny := mustZone(t, "America/New_York")
	start := Wall{1997, time.September, 2, 9, 0, 0} // a Tuesday
	horizon := mustUTC(t, "1998-01-01T00:00:00Z")
	tests := []struct {
		name, rule string
		start      Wall
		dur        time.Duration
		field      string
	}{
		{"minutely", "FREQ=MINUTELY;COUNT=5", start, time.Hour, "rrule"},
		{"secondly", "FREQ=SECONDLY;COUNT=5", start, time.Hour, "rrule"},
		{"unknown freq", "FREQ=FORTNIGHTLY", start, time.Hour, "rrule"},
		{"no freq", "COUNT=5", start, time.Hour, "rrule"},
		{"empty", "", start, time.Hour, "rrule"},
		{"garbage", "every tuesday", start, time.Hour, "rrule"},
		{"unknown part", "FREQ=DAILY;FOO=1", start, time.Hour, "rrule"},
		{"dtstart part", "FREQ=DAILY;DTSTART=19970902T090000", start, time.Hour, "rrule"},
		{"second line", "FREQ=DAILY\nRRULE:FREQ=DAILY", start, time.Hour, "rrule"},
		{"duplicate", "FREQ=DAILY;COUNT=2;COUNT=3", start, time.Hour, "rrule"},
		{"count and until", "FREQ=DAILY;COUNT=2;UNTIL=19971224T000000Z", start, time.Hour, "rrule"},
		{"count zero", "FREQ=DAILY;COUNT=0", start, time.Hour, "rrule"},
		{"count negative", "FREQ=DAILY;COUNT=-3", start, time.Hour, "rrule"},
		{"interval zero", "FREQ=DAILY;INTERVAL=0;COUNT=2", start, time.Hour, "rrule"},
		{"interval huge", "FREQ=DAILY;INTERVAL=99999999999;COUNT=2", start, time.Hour, "rrule"},
		{"until date only", "FREQ=DAILY;UNTIL=19971224", start, time.Hour, "rrule"},
		{"until garbage", "FREQ=DAILY;UNTIL=1997122", start, time.Hour, "rrule"},
		{"until month 13", "FREQ=DAILY;UNTIL=19971324T000000Z", start, time.Hour, "rrule"},
		{"until before start", "FREQ=DAILY;UNTIL=19970901T000000Z", start, time.Hour, "rrule"},
		{"bymonthday weekly", "FREQ=WEEKLY;BYMONTHDAY=2;COUNT=2", start, time.Hour, "rrule"},      // [published: RFC 5545 §3.3.10]
		{"byweekno monthly", "FREQ=MONTHLY;BYWEEKNO=36;COUNT=2", start, time.Hour, "rrule"},       // [published: RFC 5545 §3.3.10]
		{"byyearday daily", "FREQ=DAILY;BYYEARDAY=245;COUNT=2", start, time.Hour, "rrule"},        // [published: RFC 5545 §3.3.10]
		{"numbered byday weekly", "FREQ=WEEKLY;BYDAY=1TU;COUNT=2", start, time.Hour, "rrule"},     // [published: RFC 5545 §3.3.10]
		{"numbered byday weekno", "FREQ=YEARLY;BYWEEKNO=36;BYDAY=1TU", start, time.Hour, "rrule"}, // [published: RFC 5545 §3.3.10]
		{"bysetpos alone", "FREQ=MONTHLY;BYSETPOS=1;COUNT=2", start, time.Hour, "rrule"},          // [published: RFC 5545 §3.3.10]
		{"byday zero", "FREQ=MONTHLY;BYDAY=0TU;COUNT=2", start, time.Hour, "rrule"},
		{"byday sign only", "FREQ=MONTHLY;BYDAY=+TU;COUNT=2", start, time.Hour, "rrule"},
		{"byday bad", "FREQ=WEEKLY;BYDAY=TUE;COUNT=2", start, time.Hour, "rrule"},
		{"bymonthday out of range", "FREQ=MONTHLY;BYMONTHDAY=32;COUNT=2", start, time.Hour, "rrule"},
		{"byhour out of range", "FREQ=DAILY;BYHOUR=24;COUNT=2", start, time.Hour, "rrule"},
		{"byhour not a number", "FREQ=DAILY;BYHOUR=X;COUNT=2", start, time.Hour, "rrule"},
		{"byhour empty item", "FREQ=DAILY;BYHOUR=9,,10;COUNT=2", start, time.Hour, "rrule"},
		{"wkst bad", "FREQ=WEEKLY;WKST=1MO;COUNT=2", start, time.Hour, "rrule"},
		{"zero duration", "FREQ=DAILY;COUNT=2", start, 0, "duration"},
		{"negative duration", "FREQ=DAILY;COUNT=2", start, -time.Hour, "duration"},
		{"start not synchronised", "FREQ=WEEKLY;BYDAY=TU;COUNT=2", Wall{1997, time.September, 3, 9, 0, 0}, time.Hour, "start"},
		{"start never matches", "FREQ=YEARLY;BYMONTH=2;BYMONTHDAY=30;COUNT=1", start, time.Hour, "start"},
		{"start in a gap", "FREQ=DAILY;COUNT=2", Wall{2007, time.March, 11, 2, 30, 0}, time.Hour, "start"}, // [published: RFC 5545 §3.3.5 example]
		{"start February 30", "FREQ=DAILY;COUNT=2", Wall{1998, time.February, 30, 9, 0, 0}, time.Hour, "start"},
	}
	tests = append(tests, struct {
		name, rule string
		start      Wall
		dur        time.Duration
		field      string
	}{"too long", "FREQ=DAILY;COUNT=2;BYMINUTE=" + strings.Repeat("0,", 300) + "0", start, time.Hour, "rrule"})
	// Where the reason matters, part of what it must say.
	says := map[string]string{"minutely": "not allowed", "secondly": "not allowed", "until date only": "date alone"}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			occ, err := Expand(SeriesSpec{RRule: tc.rule, Start: tc.start, Duration: tc.dur}, ny, horizon, 500)
			if !isInvalid(err, tc.field) {
				t.Errorf("got %d instances, err %v; want ErrInvalid naming %s", len(occ), err, tc.field)
			} else if !strings.Contains(err.(*beamledger.Error).Fields[tc.field], says[tc.name]) {
				t.Errorf("reason %q, want it to say %q", err.(*beamledger.Error).Fields[tc.field], says[tc.name])
			}
			if err != nil && strings.Contains(err.Error(), "strconv") {
				t.Errorf("message leaks Go internals: %v", err)
			}
		})
	}
	// Several problems are reported together.
	_, err := Expand(SeriesSpec{RRule: "FREQ=MINUTELY", Start: Wall{1998, time.February, 30, 9, 0, 0}}, ny, horizon, 500)
	if !isInvalid(err, "rrule") || !isInvalid(err, "start") || !isInvalid(err, "duration") {
		t.Errorf("err = %v, want rrule, start and duration named", err)
	}
}
