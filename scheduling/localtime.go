package scheduling

import (
	"strings"
	"time"

	"beamledger"
)

// Wall is a local civil date-time with no zone: what a user types in a form, read in
// the facility's zone. It carries no offset, so on the day clocks change it may name
// no instant (a gap) or two (an overlap); ResolveWall decides which instant it means.
type Wall struct {
	Year   int
	Month  time.Month
	Day    int
	Hour   int
	Minute int
	Second int
}

// Resolution says how a wall time became an instant.
type Resolution string

// Resolutions, following RFC 5545 §3.3.5.
const (
	// ResolutionExact: the wall time occurs exactly once.
	ResolutionExact Resolution = "exact"
	// ResolutionGap: the wall time does not occur (clocks skip it). It is read with the
	// UTC offset in force before the gap, so it lands after the gap by the size of the
	// shift: New York 2007-03-11 02:30 becomes 03:30 EDT.
	ResolutionGap Resolution = "gap"
	// ResolutionOverlap: the wall time occurs twice (clocks go back); the first
	// occurrence is meant.
	ResolutionOverlap Resolution = "overlap"
)

const wallLayout = "2006-01-02T15:04:05"

// WallAt returns the wall time that instant t shows in loc.
func WallAt(t time.Time, loc *time.Location) Wall {
	lt := t.In(loc)
	return Wall{lt.Year(), lt.Month(), lt.Day(), lt.Hour(), lt.Minute(), lt.Second()}
}

// String formats w as 2006-01-02T15:04:05, which ParseWall reads back.
func (w Wall) String() string { return w.floating().Format(wallLayout) }

// MarshalText writes w as String does, so JSON carries "2024-11-03T01:30:00".
func (w Wall) MarshalText() ([]byte, error) { return []byte(w.String()), nil }

// UnmarshalText reads what ParseWall accepts.
func (w *Wall) UnmarshalText(b []byte) error {
	v, err := ParseWall(string(b))
	if err != nil {
		return err
	}
	*w = v
	return nil
}

// floating is w's fields as a UTC time: a zone-free value to do calendar arithmetic on.
// Out-of-range fields are normalised as time.Date does.
func (w Wall) floating() time.Time {
	return time.Date(w.Year, w.Month, w.Day, w.Hour, w.Minute, w.Second, 0, time.UTC)
}

// problem says what is wrong with w's fields, or "" when it names a real calendar date
// and time of day.
func (w Wall) problem() string {
	switch {
	case w.Year < 1 || w.Year > 9999:
		return "year must be 0001 to 9999"
	case w.Month < 1 || w.Month > 12:
		return "month must be 01 to 12"
	case w.Day < 1 || w.Day > daysIn(w.Year, w.Month):
		return "day is not in that month"
	case w.Hour < 0 || w.Hour > 23:
		return "hour must be 00 to 23"
	case w.Minute < 0 || w.Minute > 59:
		return "minute must be 00 to 59"
	case w.Second < 0 || w.Second > 59:
		return "second must be 00 to 59"
	}
	return ""
}

func daysIn(year int, month time.Month) int {
	return time.Date(year, month+1, 0, 0, 0, 0, 0, time.UTC).Day()
}

// ParseWall reads a local date-time such as "2024-11-03T01:30" or
// "2024-11-03T01:30:00" (a space may stand for the T). The error is ErrInvalid and
// names the part that is wrong (month, day, hour…).
func ParseWall(s string) (Wall, error) {
	w, rest, _, reason := parseWallPrefix(s)
	if reason == "" && rest != "" {
		reason = "must be a local time with no fraction or UTC offset after it"
	}
	if reason != "" {
		return Wall{}, beamledger.Invalid("local date-time: "+reason, nil)
	}
	return w, nil
}

const wallFormatHint = "must look like 2024-11-03T09:30 or 2024-11-03T09:30:00"

// parseWallPrefix reads YYYY-MM-DDTHH:MM[:SS] from the start of s and returns what
// follows. reason is "" on success.
func parseWallPrefix(s string) (w Wall, rest string, hasSec bool, reason string) {
	const short = len("2006-01-02T15:04")
	if len(s) < short || s[4] != '-' || s[7] != '-' || !strings.ContainsRune("Tt ", rune(s[10])) || s[13] != ':' {
		return Wall{}, "", false, wallFormatHint
	}
	var ok [5]bool
	w.Year, ok[0] = digits(s[0:4])
	var m int
	m, ok[1] = digits(s[5:7])
	w.Month = time.Month(m)
	w.Day, ok[2] = digits(s[8:10])
	w.Hour, ok[3] = digits(s[11:13])
	w.Minute, ok[4] = digits(s[14:16])
	if ok != [5]bool{true, true, true, true, true} {
		return Wall{}, "", false, wallFormatHint
	}
	rest = s[short:]
	if len(rest) > 0 && rest[0] == ':' {
		var okSec bool
		if len(rest) < 3 {
			return Wall{}, "", false, wallFormatHint
		}
		if w.Second, okSec = digits(rest[1:3]); !okSec {
			return Wall{}, "", false, wallFormatHint
		}
		rest, hasSec = rest[3:], true
	}
	if p := w.problem(); p != "" {
		return Wall{}, "", false, p
	}
	return w, rest, hasSec, ""
}

// digits parses a fixed-width run of ASCII digits (no sign, no spaces).
func digits(s string) (int, bool) {
	n := 0
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c < '0' || c > '9' {
			return 0, false
		}
		n = n*10 + int(c-'0')
	}
	return n, len(s) > 0
}

// WallExists reports whether the wall time occurs in loc: false in a gap, when the
// clocks skip it.
func WallExists(w Wall, loc *time.Location) bool {
	_, r := ResolveWall(w, loc)
	return r != ResolutionGap
}

// ResolveWall turns a wall time in loc into an instant following RFC 5545 §3.3.5: a
// time that occurs once is exact; one that occurs twice means the first occurrence; one
// that does not occur (in a gap) is read with the UTC offset in force before the gap.
// time.Date promises neither rule (golang/go#50223), so the offsets are worked out here:
// every offset loc uses within two days of w is tried, and a candidate instant counts
// only if it shows w again on the clock. The returned time is in UTC. Fields out of
// range are normalised as time.Date does; check them first (ParseWall does). loc must
// not be nil.
func ResolveWall(w Wall, loc *time.Location) (time.Time, Resolution) {
	f := w.floating()
	w = WallAt(f, time.UTC) // normalised fields, so the round-trip check compares like with like
	periods := zonePeriods(f.Add(-48*time.Hour), f.Add(48*time.Hour), loc)

	var hits []time.Time
	seen := map[int]bool{}
	for _, p := range periods {
		if seen[p.offset] {
			continue
		}
		seen[p.offset] = true
		c := f.Add(-sec(p.offset))
		if WallAt(c, loc) == w {
			hits = append(hits, c)
		}
	}
	switch len(hits) {
	case 1:
		return hits[0], ResolutionExact
	case 0:
		// In a gap: find the forward jump whose skipped walls [T+before, T+after) hold f.
		for i := 0; i+1 < len(periods); i++ {
			before, after := periods[i].offset, periods[i+1].offset
			t := periods[i].end
			if after > before && !f.Before(t.Add(sec(before))) && f.Before(t.Add(sec(after))) {
				return f.Add(-sec(before)), ResolutionGap
			}
		}
		// Unreachable with real zone data (offsets stay within ±48 h); fall back to Go.
		return time.Date(w.Year, w.Month, w.Day, w.Hour, w.Minute, w.Second, 0, loc).UTC(), ResolutionGap
	}
	first := hits[0]
	for _, h := range hits[1:] {
		if h.Before(first) {
			first = h
		}
	}
	return first, ResolutionOverlap
}

func sec(n int) time.Duration { return time.Duration(n) * time.Second }

// zonePeriod is a stretch of time during which loc keeps one UTC offset.
type zonePeriod struct {
	end    time.Time // zero when the period never ends
	offset int       // seconds east of UTC
}

// zonePeriods lists, in order, the periods of loc that overlap the instants [from, to].
func zonePeriods(from, to time.Time, loc *time.Location) []zonePeriod {
	var out []zonePeriod
	t := from
	// A zone changes offset at most a few times in four days; the bound only guards
	// against a malformed zone.
	for range 16 {
		lt := t.In(loc)
		_, off := lt.Zone()
		_, end := lt.ZoneBounds()
		out = append(out, zonePeriod{end: end, offset: off})
		if end.IsZero() || end.After(to) || !end.After(t) {
			break
		}
		t = end
	}
	return out
}

// ParseInstant reads a start or end time sent by a client: either an RFC 3339 instant
// with an offset ("2024-11-03T05:30:00Z", "2024-11-03T01:30:00-04:00", fractional seconds
// allowed, seconds optional), or a wall time without offset ("2024-11-03T01:30"), which
// is read in loc by ResolveWall. It returns the UTC instant and how it was resolved
// (always exact for an instant with an offset). Errors are ErrInvalid naming field.
// A nil loc refuses wall times.
func ParseInstant(field, s string, loc *time.Location) (time.Time, Resolution, error) {
	s = strings.TrimSpace(s)
	w, rest, hasSec, reason := parseWallPrefix(s)
	if reason != "" {
		if reason == wallFormatHint {
			reason = "must look like 2024-11-03T09:30 (facility time) or 2024-11-03T14:30:00Z"
		}
		return time.Time{}, "", beamledger.InvalidField(field, reason)
	}
	if rest == "" {
		if loc == nil {
			return time.Time{}, "", beamledger.InvalidField(field, "must include a UTC offset such as Z or +01:00")
		}
		t, r := ResolveWall(w, loc)
		return t, r, nil
	}
	nanos := 0
	if rest[0] == '.' {
		if !hasSec {
			return time.Time{}, "", beamledger.InvalidField(field, "fractional seconds need whole seconds before them")
		}
		n := 1
		for n < len(rest) && rest[n] >= '0' && rest[n] <= '9' {
			n++
		}
		if n == 1 || n > 10 {
			return time.Time{}, "", beamledger.InvalidField(field, "fractional seconds must have 1 to 9 digits")
		}
		frac, _ := digits(rest[1:n])
		for i := n; i <= 9; i++ {
			frac *= 10
		}
		nanos, rest = frac, rest[n:]
	}
	offset, ok := parseOffset(rest)
	if !ok {
		return time.Time{}, "", beamledger.InvalidField(field, "must end in a UTC offset such as Z or +01:00, or have none (facility time)")
	}
	t := time.Date(w.Year, w.Month, w.Day, w.Hour, w.Minute, w.Second, nanos, time.UTC).Add(-offset)
	return t, ResolutionExact, nil
}

// parseOffset reads an RFC 3339 time-offset: Z or ±hh:mm.
func parseOffset(s string) (time.Duration, bool) {
	if s == "Z" || s == "z" {
		return 0, true
	}
	if len(s) != 6 || (s[0] != '+' && s[0] != '-') || s[3] != ':' {
		return 0, false
	}
	h, okH := digits(s[1:3])
	m, okM := digits(s[4:6])
	if !okH || !okM || h > 23 || m > 59 {
		return 0, false
	}
	d := time.Duration(h)*time.Hour + time.Duration(m)*time.Minute
	if s[0] == '-' {
		d = -d
	}
	return d, true
}
