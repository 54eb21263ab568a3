package scheduling

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
	"time"

	"beamledger"
)

func mustZone(t *testing.T, name string) *time.Location {
	t.Helper()
	loc, err := time.LoadLocation(name)
	if err != nil {
		t.Fatalf("load %s: %v", name, err)
	}
	return loc
}

func mustWall(t *testing.T, s string) Wall {
	t.Helper()
	w, err := ParseWall(s)
	if err != nil {
		t.Fatalf("ParseWall(%q): %v", s, err)
	}
	return w
}

func mustUTC(t *testing.T, s string) time.Time {
	t.Helper()
	v, err := time.Parse(time.RFC3339, s)
	if err != nil {
		t.Fatal(err)
	}
	return v.UTC()
}

// Sources for the zone rules used below, beside each case:
//   - US: clocks go forward at 02:00 local to 03:00 and back at 02:00 to 01:00; from 2007
//     on the second Sunday of March and first Sunday of November [memory: US Energy
//     Policy Act of 2005]. RFC 5545 §3.3.5 itself gives the 2007-03-11 02:30 case.
//   - EU: changes at 01:00 UTC on the last Sundays of March and October [memory:
//     Directive 2000/84/EC].
//   - Lord Howe +10:30/+11:00 at 02:00 local on the first Sundays of April and October;
//     Nepal +05:30 → +05:45 at 1986-01-01 00:00; New South Wales +10:00/+11:00, forward at
//     02:00 on the first Sunday of October, back at 03:00 on the first Sunday of April
//     [memory: IANA tz database, files australasia and asia].
func TestResolveWall(t *testing.T) {
	tests := []struct {
		zone, wall string
		wantUTC    string
		wantRes    Resolution
		shows      string // the instant on loc's clock, for gaps: where the wall time lands
		source     string
	}{
		// New York, spring forward 2007-03-11 02:00 → 03:00.
		{"America/New_York", "2007-03-11T02:30", "2007-03-11T07:30:00Z", ResolutionGap, "2007-03-11T03:30:00-04:00", "[published: RFC 5545 §3.3.5]"},
		{"America/New_York", "2007-03-11T02:00", "2007-03-11T07:00:00Z", ResolutionGap, "2007-03-11T03:00:00-04:00", "[published: RFC 5545 §3.3.5 rule] US rules [memory]"},
		{"America/New_York", "2007-03-11T01:59:59", "2007-03-11T06:59:59Z", ResolutionExact, "2007-03-11T01:59:59-05:00", "US rules [memory]"},
		{"America/New_York", "2007-03-11T03:00", "2007-03-11T07:00:00Z", ResolutionExact, "2007-03-11T03:00:00-04:00", "US rules [memory]"},
		// New York, fall back 2024-11-03 02:00 → 01:00: 01:00–01:59:59 occur twice.
		{"America/New_York", "2024-11-03T01:30", "2024-11-03T05:30:00Z", ResolutionOverlap, "2024-11-03T01:30:00-04:00", "[published: RFC 5545 §3.3.5 rule: first occurrence] US rules [memory]"},
		{"America/New_York", "2024-11-03T01:00", "2024-11-03T05:00:00Z", ResolutionOverlap, "2024-11-03T01:00:00-04:00", "US rules [memory]"},
		{"America/New_York", "2024-11-03T01:59:59", "2024-11-03T05:59:59Z", ResolutionOverlap, "2024-11-03T01:59:59-04:00", "US rules [memory]"},
		{"America/New_York", "2024-11-03T00:59:59", "2024-11-03T04:59:59Z", ResolutionExact, "2024-11-03T00:59:59-04:00", "US rules [memory]"},
		{"America/New_York", "2024-11-03T02:00", "2024-11-03T07:00:00Z", ResolutionExact, "2024-11-03T02:00:00-05:00", "US rules [memory]"},
		{"America/New_York", "2024-07-01T12:00", "2024-07-01T16:00:00Z", ResolutionExact, "2024-07-01T12:00:00-04:00", "EDT [memory]"},
		// Berlin: 2024-03-31 02:00 → 03:00 CEST; 2024-10-27 03:00 → 02:00 CET.
		{"Europe/Berlin", "2024-03-31T02:30", "2024-03-31T01:30:00Z", ResolutionGap, "2024-03-31T03:30:00+02:00", "EU rules [memory]; [published: RFC 5545 §3.3.5 rule]"},
		{"Europe/Berlin", "2024-10-27T02:30", "2024-10-27T00:30:00Z", ResolutionOverlap, "2024-10-27T02:30:00+02:00", "EU rules [memory]; [published: RFC 5545 §3.3.5 rule]"},
		{"Europe/Berlin", "2024-01-15T09:00", "2024-01-15T08:00:00Z", ResolutionExact, "2024-01-15T09:00:00+01:00", "CET [memory]"},
		// Lord Howe Island shifts by 30 minutes.
		{"Australia/Lord_Howe", "2024-10-06T02:15", "2024-10-05T15:45:00Z", ResolutionGap, "2024-10-06T02:45:00+11:00", "tz australasia [memory]"},
		{"Australia/Lord_Howe", "2024-04-07T01:45", "2024-04-06T14:45:00Z", ResolutionOverlap, "2024-04-07T01:45:00+11:00", "tz australasia [memory]"},
		{"Australia/Lord_Howe", "2024-04-07T02:00", "2024-04-06T15:30:00Z", ResolutionExact, "2024-04-07T02:00:00+10:30", "tz australasia [memory]"},
		// Nepal moved from +05:30 to +05:45: a 15-minute gap.
		{"Asia/Kathmandu", "1986-01-01T00:05", "1985-12-31T18:35:00Z", ResolutionGap, "1986-01-01T00:20:00+05:45", "tz asia [memory]"},
		{"Asia/Kathmandu", "1986-01-01T00:15", "1985-12-31T18:30:00Z", ResolutionExact, "1986-01-01T00:15:00+05:45", "tz asia [memory]"},
		// Southern hemisphere: Sydney goes forward in October and back in April.
		{"Australia/Sydney", "2024-10-06T02:30", "2024-10-05T16:30:00Z", ResolutionGap, "2024-10-06T03:30:00+11:00", "tz australasia [memory]"},
		{"Australia/Sydney", "2024-04-07T02:30", "2024-04-06T15:30:00Z", ResolutionOverlap, "2024-04-07T02:30:00+11:00", "tz australasia [memory]"},
		{"Australia/Sydney", "2024-04-07T03:00", "2024-04-06T17:00:00Z", ResolutionExact, "2024-04-07T03:00:00+10:00", "tz australasia [memory]"},
		{"UTC", "2024-03-31T02:30", "2024-03-31T02:30:00Z", ResolutionExact, "2024-03-31T02:30:00Z", "[constructed]"},
	}
	for _, tc := range tests {
		t.Run(tc.zone+"/"+tc.wall, func(t *testing.T) {
			loc := mustZone(t, tc.zone)
			w := mustWall(t, tc.wall)
			got, res := ResolveWall(w, loc)
			if want := mustUTC(t, tc.wantUTC); !got.Equal(want) || res != tc.wantRes { // source: tc.source
				t.Errorf("ResolveWall = %s %s, want %s %s (%s)", got.UTC().Format(time.RFC3339), res, want.Format(time.RFC3339), tc.wantRes, tc.source)
			}
			if got.Location() != time.UTC {
				t.Errorf("location = %v, want UTC", got.Location())
			}
			if s := got.In(loc).Format(time.RFC3339); s != tc.shows { // source: tc.source
				t.Errorf("on the local clock %s, want %s (%s)", s, tc.shows, tc.source)
			}
			if WallExists(w, loc) != (tc.wantRes != ResolutionGap) {
				t.Errorf("WallExists = %v for a %s wall time", !(tc.wantRes != ResolutionGap), tc.wantRes)
			}
			if tc.wantRes == ResolutionOverlap {
				// The wall time must really come round again later (checked with Go's own
				// conversion, not ResolveWall).
				again := false
				for d := 15 * time.Minute; d <= 2*time.Hour; d += 15 * time.Minute {
					if WallAt(got.Add(d), loc) == w {
						again = true
					}
				}
				if !again {
					t.Errorf("%s does not occur a second time", tc.wall)
				}
			}
		})
	}
}

// TestResolveWallMatchesBruteForce checks every minute of days with offset changes
// against an oracle built by stepping through instants one minute at a time and noting
// what each shows on the clock: walls seen once are exact, twice an overlap (first
// wins), never a gap, read with the offset the clock showed just before the jump.
// [computed: from Go's zone data by exhaustive search]
func TestResolveWallMatchesBruteForce(t *testing.T) {
	days := []struct {
		zone, day string
		odd       int // minutes of the day in a gap or overlap [memory: tz rules as above]
	}{
		{"America/New_York", "2007-03-11", 60},
		{"America/New_York", "2024-11-03", 60},
		{"Europe/Berlin", "2024-03-31", 60},
		{"Europe/Berlin", "2024-10-27", 60},
		{"Australia/Lord_Howe", "2024-04-07", 30},
		{"Australia/Lord_Howe", "2024-10-06", 30},
		{"Asia/Kathmandu", "1986-01-01", 15},
		{"Australia/Sydney", "2024-10-06", 60},
		{"Australia/Sydney", "2024-04-07", 60},
		{"America/Santiago", "2024-04-06", 60}, // back at 24:00 to 23:00 [memory]
		{"America/Santiago", "2024-09-08", 60}, // forward at 24:00 to 01:00 [memory]
		{"Pacific/Apia", "2011-12-30", 1440},   // Samoa skipped 30 December 2011 [memory]
		{"Europe/London", "2024-06-01", 0},
	}
	for _, d := range days {
		t.Run(d.zone+"/"+d.day, func(t *testing.T) {
			loc := mustZone(t, d.zone)
			day, _ := time.Parse("2006-01-02", d.day)
			seen := map[Wall][]time.Time{}
			type jump struct {
				at            time.Time
				before, after int
			}
			var jumps []jump
			from, to := day.Add(-36*time.Hour), day.Add(60*time.Hour)
			_, prevOff := from.In(loc).Zone()
			for u := from; u.Before(to); u = u.Add(time.Minute) {
				_, off := u.In(loc).Zone()
				if off != prevOff {
					jumps = append(jumps, jump{u, prevOff, off})
					prevOff = off
				}
				w := WallAt(u, loc)
				seen[w] = append(seen[w], u)
			}
			changes := 0
			for m := 0; m < 24*60; m++ {
				w := WallAt(day.Add(time.Duration(m)*time.Minute), time.UTC)
				got, res := ResolveWall(w, loc)
				var want time.Time
				var wantRes Resolution
				switch n := len(seen[w]); {
				case n == 1:
					want, wantRes = seen[w][0], ResolutionExact
				case n > 1:
					want, wantRes = seen[w][0], ResolutionOverlap
				default:
					wantRes = ResolutionGap
					f := w.floating()
					for _, j := range jumps {
						if j.after > j.before && !f.Before(j.at.Add(sec(j.before))) && f.Before(j.at.Add(sec(j.after))) {
							want = f.Add(-sec(j.before))
						}
					}
					if want.IsZero() {
						t.Fatalf("%s: oracle found no jump", w)
					}
				}
				if wantRes != ResolutionExact {
					changes++
				}
				if !got.Equal(want) || res != wantRes {
					t.Errorf("%s: got %s %s, want %s %s", w, got.Format(time.RFC3339), res, want.UTC().Format(time.RFC3339), wantRes)
				}
			}
			if changes != d.odd {
				t.Errorf("%d minutes in a gap or overlap, want %d", changes, d.odd)
			}
		})
	}
}

// Fields out of range are normalised as time.Date does, as documented.
func TestResolveWallNormalises(t *testing.T) {
	ny := mustZone(t, "America/New_York")
	got, res := ResolveWall(Wall{2024, time.January, 32, 9, 0, 0}, ny)
	if want := mustUTC(t, "2024-02-01T14:00:00Z"); !got.Equal(want) || res != ResolutionExact { // [computed] EST
		t.Errorf("January 32 = %s %s, want %s exact", got, res, want)
	}
}

func TestElapsedAcrossFallBack(t *testing.T) {
	ny := mustZone(t, "America/New_York")
	start, _ := ResolveWall(mustWall(t, "2024-11-02T20:00"), ny)
	end, _ := ResolveWall(mustWall(t, "2024-11-03T08:00"), ny)
	if got := end.Sub(start); got != 13*time.Hour { // [computed] REFERENCE.md §2: 12 h on the clock + 1 h repeated
		t.Errorf("elapsed = %s, want 13h", got)
	}
}

func TestParseWall(t *testing.T) {
	good := []struct {
		in   string
		want Wall
	}{
		{"2024-11-03T01:30", Wall{2024, time.November, 3, 1, 30, 0}},
		{"2024-11-03T01:30:45", Wall{2024, time.November, 3, 1, 30, 45}},
		{"2024-11-03 01:30", Wall{2024, time.November, 3, 1, 30, 0}},
		{"2024-02-29T00:00", Wall{2024, time.February, 29, 0, 0, 0}},       // 2024 is a leap year [computed: divisible by 4, not by 100]
		{"2000-02-29T23:59:59", Wall{2000, time.February, 29, 23, 59, 59}}, // [computed: divisible by 400]
	}
	for _, tc := range good {
		got, err := ParseWall(tc.in)
		if err != nil || got != tc.want {
			t.Errorf("ParseWall(%q) = %+v, %v; want %+v", tc.in, got, err, tc.want)
			continue
		}
		back, err := ParseWall(got.String())
		if err != nil || back != got {
			t.Errorf("round trip of %q via %q = %+v, %v", tc.in, got.String(), back, err)
		}
	}
	if s := (Wall{2024, time.November, 3, 1, 30, 0}).String(); s != "2024-11-03T01:30:00" {
		t.Errorf("String = %q", s)
	}

	bad := []struct{ in, names string }{
		{"", "2024-11-03T09:30"},
		{"garbage", "2024-11-03T09:30"},
		{"2024-11-3T01:30", "2024-11-03T09:30"},
		{"2024/11/03T01:30", "2024-11-03T09:30"},
		{"2024-13-01T00:00", "month"},
		{"2024-00-01T00:00", "month"},
		{"2024-04-31T00:00", "day"},
		{"2023-02-29T00:00", "day"}, // 2023 is not a leap year [computed]
		{"1900-02-29T00:00", "day"}, // [computed: divisible by 100, not by 400]
		{"2024-01-00T00:00", "day"},
		{"2024-01-01T24:00", "hour"},
		{"2024-01-01T10:60", "minute"},
		{"2024-01-01T10:00:60", "second"},
		{"2024-01-01T10:00:5", "2024-11-03T09:30"},
		{"0000-01-01T10:00", "year"},
		{"2024-01-01T10:00Z", "offset"},
		{"2024-01-01T10:00:00+01:00", "offset"},
		{"2024-01-01T10:00:00.5", "fraction"},
		{"+2024-01-01T10:00", "2024-11-03T09:30"},
	}
	for _, tc := range bad {
		_, err := ParseWall(tc.in)
		if err == nil {
			t.Errorf("ParseWall(%q) succeeded", tc.in)
			continue
		}
		if !errors.Is(err, beamledger.ErrInvalid) || !strings.Contains(err.Error(), tc.names) {
			t.Errorf("ParseWall(%q) error %q, want ErrInvalid mentioning %q", tc.in, err, tc.names)
		}
	}
}

func TestWallJSON(t *testing.T) {
	b, err := json.Marshal(struct{ W Wall }{Wall{2024, time.March, 31, 2, 30, 0}})
	if err != nil || string(b) != `{"W":"2024-03-31T02:30:00"}` {
		t.Fatalf("marshal = %s, %v", b, err)
	}
	var v struct{ W Wall }
	if err := json.Unmarshal([]byte(`{"W":"2024-03-31T02:30"}`), &v); err != nil || v.W != (Wall{2024, time.March, 31, 2, 30, 0}) {
		t.Fatalf("unmarshal = %+v, %v", v, err)
	}
	if err := json.Unmarshal([]byte(`{"W":"2024-02-30T02:30"}`), &v); err == nil {
		t.Fatal("unmarshal of February 30 succeeded")
	}
}

func TestParseInstant(t *testing.T) {
	ny := mustZone(t, "America/New_York")
	good := []struct {
		in      string
		want    string // RFC 3339 in UTC, with fraction when there is one
		wantRes Resolution
		source  string
	}{
		{"2024-11-03T05:30:00Z", "2024-11-03T05:30:00Z", ResolutionExact, "[published: RFC 3339 §5.6]"},
		{"2024-11-03T05:30:00z", "2024-11-03T05:30:00Z", ResolutionExact, "[published: RFC 3339 §5.6, case-insensitive T and Z]"},
		{"2024-11-03T01:30:00-04:00", "2024-11-03T05:30:00Z", ResolutionExact, "[published: RFC 3339 §5.6]"},
		{"2024-11-03T01:30:00-05:00", "2024-11-03T06:30:00Z", ResolutionExact, "[published: RFC 3339 §5.6] the second 01:30, chosen by its offset"},
		{"2024-11-03T10:30:00+05:45", "2024-11-03T04:45:00Z", ResolutionExact, "[published: RFC 3339 §5.6]"},
		{"2024-11-03T01:30:00.25+01:00", "2024-11-03T00:30:00.25Z", ResolutionExact, "[published: RFC 3339 §5.6 time-secfrac]"},
		{"2024-11-03T01:30:00.123456789Z", "2024-11-03T01:30:00.123456789Z", ResolutionExact, "[published: RFC 3339 §5.6 time-secfrac]"},
		{"2024-11-03T01:30Z", "2024-11-03T01:30:00Z", ResolutionExact, "[constructed] seconds optional here"},
		{"  2024-11-03T05:30:00Z ", "2024-11-03T05:30:00Z", ResolutionExact, "[constructed] surrounding space trimmed"},
		{"2024-11-03T01:30", "2024-11-03T05:30:00Z", ResolutionOverlap, "[published: RFC 5545 §3.3.5] first occurrence"},
		{"2007-03-11T02:30", "2007-03-11T07:30:00Z", ResolutionGap, "[published: RFC 5545 §3.3.5]"},
		{"2024-07-01T09:00:00", "2024-07-01T13:00:00Z", ResolutionExact, "EDT [memory]"},
	}
	for _, tc := range good {
		got, res, err := ParseInstant("start", tc.in, ny)
		if err != nil || got.Format(time.RFC3339Nano) != tc.want || res != tc.wantRes { // source: tc.source
			t.Errorf("ParseInstant(%q) = %s %s %v; want %s %s (%s)", tc.in, got.Format(time.RFC3339Nano), res, err, tc.want, tc.wantRes, tc.source)
		}
		if err == nil && got.Location() != time.UTC {
			t.Errorf("ParseInstant(%q) location %v, want UTC", tc.in, got.Location())
		}
		// Cross-check instants with offsets against Go's RFC 3339 parser [computed].
		if strings.ContainsAny(tc.in[10:], "Zz+") || strings.Count(tc.in, "-") > 2 {
			if ref, perr := time.Parse(time.RFC3339Nano, strings.ToUpper(strings.TrimSpace(tc.in))); perr == nil && !ref.Equal(got) {
				t.Errorf("ParseInstant(%q) = %s, time.Parse = %s", tc.in, got, ref)
			}
		}
	}

	bad := []struct{ in, names string }{
		{"", "2024-11-03T09:30"},
		{"garbage", "2024-11-03T09:30"},
		{"tomorrow 9am", "2024-11-03T09:30"},
		{"2024-13-01T00:00:00Z", "month"},
		{"2024-04-31T10:00:00Z", "day"},
		{"2024-02-30T10:00", "day"},
		{"2024-01-01T25:00:00Z", "hour"},
		{"2024-01-01T10:00:00+24:00", "offset"},
		{"2024-01-01T10:00:00+0100", "offset"},
		{"2024-01-01T10:00:00 UTC", "offset"},
		{"2024-01-01T10:00:00.Z", "fraction"},
		{"2024-01-01T10:00:00.1234567890Z", "fraction"},
		{"2024-01-01T10:00.5Z", "fraction"},
	}
	for _, tc := range bad {
		_, _, err := ParseInstant("start", tc.in, ny)
		var be *beamledger.Error
		if !errors.As(err, &be) || !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("ParseInstant(%q) error = %v, want a beamledger ErrInvalid", tc.in, err)
			continue
		}
		if _, ok := be.Fields["start"]; !ok || !strings.Contains(be.Fields["start"], tc.names) {
			t.Errorf("ParseInstant(%q) fields = %v, want start: …%s…", tc.in, be.Fields, tc.names)
		}
	}

	if _, _, err := ParseInstant("end", "2024-11-03T01:30", nil); err == nil || !strings.Contains(err.Error(), "end") {
		t.Errorf("wall time with no zone: err = %v, want one naming end", err)
	}
	if got, _, err := ParseInstant("end", "2024-11-03T01:30:00Z", nil); err != nil || !got.Equal(mustUTC(t, "2024-11-03T01:30:00Z")) {
		t.Errorf("instant with no zone = %s, %v", got, err)
	}
}
