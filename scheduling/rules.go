package scheduling

import (
	"fmt"
	"slices"
	"strings"
	"time"

	"beamledger"
)

const minutesPerDay = 24 * 60

// ClockWindow is a recurring local-time window, such as weekdays 08:00–18:00. An End at
// or before Start runs past midnight into the next day: 18:00–08:00 is overnight, and
// equal times span a whole day.
type ClockWindow struct {
	// Days are the days on which the window starts; empty means every day. In JSON they
	// are numbers as in time.Weekday: 0 Sunday, 1 Monday … 6 Saturday.
	Days  []time.Weekday `json:"days"`
	Start string         `json:"start"` // "HH:MM", 00:00–23:59
	End   string         `json:"end"`   // "HH:MM", 00:00–24:00
}

// clockMinute reads "HH:MM" as minutes after midnight, accepting at most highest.
func clockMinute(s string, highest int) (int, bool) {
	if len(s) != 5 || s[2] != ':' {
		return 0, false
	}
	for _, i := range []int{0, 1, 3, 4} {
		if s[i] < '0' || s[i] > '9' {
			return 0, false
		}
	}
	h, m := int(s[0]-'0')*10+int(s[1]-'0'), int(s[3]-'0')*10+int(s[4]-'0')
	if m > 59 || h*60+m > highest {
		return 0, false
	}
	return h*60 + m, true
}

// minutes returns the window as minutes after the local midnight of the day it starts,
// from < to ≤ from+24h, or ok false when Start or End does not parse.
func (w ClockWindow) minutes() (from, to int, ok bool) {
	from, okFrom := clockMinute(w.Start, minutesPerDay-1)
	to, okTo := clockMinute(w.End, minutesPerDay)
	if to <= from {
		to += minutesPerDay
	}
	return from, to, okFrom && okTo
}

// problem words what is wrong with a window, or returns "".
func (w ClockWindow) problem() string {
	if _, ok := clockMinute(w.Start, minutesPerDay-1); !ok {
		return "start must be HH:MM between 00:00 and 23:59"
	}
	if _, ok := clockMinute(w.End, minutesPerDay); !ok {
		return "end must be HH:MM between 00:00 and 24:00"
	}
	for _, d := range w.Days {
		if d < time.Sunday || d > time.Saturday {
			return "days must be 0 (Sunday) to 6 (Saturday)"
		}
	}
	return ""
}

// String shows the window as people read it: "Mon–Fri 08:00–18:00".
func (w ClockWindow) String() string { return dayList(w.Days) + " " + w.Start + "–" + w.End }

// dayList names days Monday first, with runs of three or more as ranges: "Mon–Fri, Sun".
func dayList(days []time.Weekday) string {
	var on [7]bool // Monday first
	for _, d := range days {
		if d >= time.Sunday && d <= time.Saturday {
			on[(d+6)%7] = true
		}
	}
	if len(days) == 0 || on == [7]bool{true, true, true, true, true, true, true} {
		return "every day"
	}
	name := func(i int) string { return time.Weekday((i + 1) % 7).String()[:3] }
	var parts []string
	for i := 0; i < 7; i++ {
		if !on[i] {
			continue
		}
		j := i
		for j+1 < 7 && on[j+1] {
			j++
		}
		if j-i >= 2 {
			parts = append(parts, name(i)+"–"+name(j))
		} else {
			for k := i; k <= j; k++ {
				parts = append(parts, name(k))
			}
		}
		i = j
	}
	return strings.Join(parts, ", ")
}

// describeWindows shows windows with the zone they are read in, for messages.
func describeWindows(windows []ClockWindow, loc *time.Location) string {
	if len(windows) == 0 {
		return "none"
	}
	parts := make([]string, len(windows))
	for i, w := range windows {
		parts[i] = w.String()
	}
	return strings.Join(parts, "; ") + " " + loc.String()
}

// Rules are an instrument's booking rules: the facility default with the instrument's
// override applied (see With). Lengths are elapsed time, so a night across a DST change
// is an hour longer or shorter than the clocks suggest.
type Rules struct {
	// SlotMinutes: starts and ends fall on multiples of this many minutes of local clock
	// time, so a grid of 60-minute slots in Kolkata (+05:30) starts at 09:00 local.
	SlotMinutes                int `json:"slot_minutes"`
	MinLengthMinutes           int `json:"min_length_minutes"`
	MaxLengthMinutes           int `json:"max_length_minutes"`            // all kinds but unattended and service
	MaxUnattendedLengthMinutes int `json:"max_unattended_length_minutes"` // unattended bookings
	LeadTimeMinutes            int `json:"lead_time_minutes"`             // how long before its start a booking must be made
	HorizonDays                int `json:"horizon_days"`                  // how many calendar days ahead a booking may start
	NoShowGraceMinutes         int `json:"no_show_grace_minutes"`         // usage must begin this soon after the start
	// PrimeAllowanceMinutesPerWeek caps each project's prime-time minutes per instrument
	// and ISO week; 0 means no cap.
	PrimeAllowanceMinutesPerWeek int `json:"prime_allowance_minutes_per_week"`
	// OpeningHours hold independent, assisted and training time; unattended time lies
	// outside them. At least one window is required.
	OpeningHours []ClockWindow `json:"opening_hours"`
	// PrimeTime is the most sought-after hours, rationed by the weekly allowance.
	PrimeTime []ClockWindow `json:"prime_time"`
}

// RulesOverride is an instrument's departure from the facility's rules: a nil field
// inherits. A non-nil empty window list replaces the inherited one (JSON [] clears,
// null or absent inherits).
type RulesOverride struct {
	SlotMinutes                  *int          `json:"slot_minutes,omitempty"`
	MinLengthMinutes             *int          `json:"min_length_minutes,omitempty"`
	MaxLengthMinutes             *int          `json:"max_length_minutes,omitempty"`
	MaxUnattendedLengthMinutes   *int          `json:"max_unattended_length_minutes,omitempty"`
	LeadTimeMinutes              *int          `json:"lead_time_minutes,omitempty"`
	HorizonDays                  *int          `json:"horizon_days,omitempty"`
	NoShowGraceMinutes           *int          `json:"no_show_grace_minutes,omitempty"`
	PrimeAllowanceMinutesPerWeek *int          `json:"prime_allowance_minutes_per_week,omitempty"`
	OpeningHours                 []ClockWindow `json:"opening_hours"` // no omitempty: [] must survive a round trip
	PrimeTime                    []ClockWindow `json:"prime_time"`
}

// weekdays are Monday to Friday.
var weekdays = []time.Weekday{time.Monday, time.Tuesday, time.Wednesday, time.Thursday, time.Friday}

// DefaultRules are the rules a new facility starts from. The values are common practice
// in shared microscopy facilities, not a standard; the no-show grace matches the default
// billing policy.
func DefaultRules() Rules {
	return Rules{
		SlotMinutes:                15,
		MinLengthMinutes:           30,
		MaxLengthMinutes:           12 * 60,
		MaxUnattendedLengthMinutes: 16 * 60,
		LeadTimeMinutes:            0,
		HorizonDays:                90,
		NoShowGraceMinutes:         30,
		OpeningHours:               []ClockWindow{{Days: slices.Clone(weekdays), Start: "08:00", End: "18:00"}},
		PrimeTime:                  []ClockWindow{{Days: slices.Clone(weekdays), Start: "09:00", End: "17:00"}},
	}
}

// With returns r with the override's set fields in place. The result shares no slices
// with r or o.
func (r Rules) With(o RulesOverride) Rules {
	set := func(dst *int, src *int) {
		if src != nil {
			*dst = *src
		}
	}
	set(&r.SlotMinutes, o.SlotMinutes)
	set(&r.MinLengthMinutes, o.MinLengthMinutes)
	set(&r.MaxLengthMinutes, o.MaxLengthMinutes)
	set(&r.MaxUnattendedLengthMinutes, o.MaxUnattendedLengthMinutes)
	set(&r.LeadTimeMinutes, o.LeadTimeMinutes)
	set(&r.HorizonDays, o.HorizonDays)
	set(&r.NoShowGraceMinutes, o.NoShowGraceMinutes)
	set(&r.PrimeAllowanceMinutesPerWeek, o.PrimeAllowanceMinutesPerWeek)
	if o.OpeningHours != nil {
		r.OpeningHours = o.OpeningHours
	}
	if o.PrimeTime != nil {
		r.PrimeTime = o.PrimeTime
	}
	r.OpeningHours, r.PrimeTime = cloneWindows(r.OpeningHours), cloneWindows(r.PrimeTime)
	return r
}

func cloneWindows(ws []ClockWindow) []ClockWindow {
	if ws == nil {
		return nil
	}
	out := make([]ClockWindow, len(ws))
	for i, w := range ws {
		w.Days = slices.Clone(w.Days)
		out[i] = w
	}
	return out
}

// Upper bounds in Validate: beyond them a value is a unit slip (hours typed as minutes,
// minutes as days), and they keep every product with time.Minute far from overflow.
const (
	maxRuleLengthMinutes = 31 * minutesPerDay
	maxLeadTimeMinutes   = 365 * minutesPerDay
	maxHorizonDays       = 3660
	minutesPerWeek       = 7 * minutesPerDay
)

// Validate checks the rules, naming each offending field by its JSON name.
func (r Rules) Validate() error {
	fe := beamledger.FieldErrors{}
	between := func(field string, v, lo, hi int) {
		if v < lo || v > hi {
			fe.Add(field, fmt.Sprintf("must be between %d and %d", lo, hi))
		}
	}
	if r.SlotMinutes < 1 || r.SlotMinutes > 240 || minutesPerDay%r.SlotMinutes != 0 {
		fe.Add("slot_minutes", "must be 1 to 240 and divide a day evenly (5, 10, 15, 30, 60…)")
	}
	between("min_length_minutes", r.MinLengthMinutes, 0, maxRuleLengthMinutes)
	between("max_length_minutes", r.MaxLengthMinutes, 1, maxRuleLengthMinutes)
	between("max_unattended_length_minutes", r.MaxUnattendedLengthMinutes, 1, maxRuleLengthMinutes)
	between("lead_time_minutes", r.LeadTimeMinutes, 0, maxLeadTimeMinutes)
	between("horizon_days", r.HorizonDays, 1, maxHorizonDays)
	between("no_show_grace_minutes", r.NoShowGraceMinutes, 0, minutesPerDay)
	between("prime_allowance_minutes_per_week", r.PrimeAllowanceMinutesPerWeek, 0, minutesPerWeek)
	if r.MinLengthMinutes > r.MaxLengthMinutes || r.MinLengthMinutes > r.MaxUnattendedLengthMinutes {
		fe.Add("min_length_minutes", "must not exceed max_length_minutes or max_unattended_length_minutes")
	}
	if r.LeadTimeMinutes >= r.HorizonDays*minutesPerDay && r.HorizonDays >= 1 {
		fe.Add("lead_time_minutes", "must be shorter than the horizon, or nothing can be booked")
	}
	if len(r.OpeningHours) == 0 {
		fe.Add("opening_hours", "at least one window is required (every day 00:00–24:00 for an instrument that never closes)")
	}
	for field, ws := range map[string][]ClockWindow{"opening_hours": r.OpeningHours, "prime_time": r.PrimeTime} {
		for i, w := range ws {
			if p := w.problem(); p != "" {
				fe.Add(field, fmt.Sprintf("window %d: %s", i+1, p))
			}
		}
	}
	return fe.Err()
}

// MinutesInside counts the whole minutes of [start, end) that lie inside any of the
// windows read as local wall time in loc. It counts elapsed time, so a window of
// 01:00–04:00 holds 4 h on the night clocks go back and 2 h on the night they go forward.
// Windows that do not parse count for nothing; Validate rejects them.
func MinutesInside(windows []ClockWindow, start, end time.Time, loc *time.Location) int {
	return int(timeInside(windows, start, end, loc) / time.Minute)
}

// Inside reports whether all of the non-empty range [start, end) lies inside the windows.
func Inside(windows []ClockWindow, start, end time.Time, loc *time.Location) bool {
	return start.Before(end) && timeInside(windows, start, end, loc) == end.Sub(start)
}

// timeInside is the elapsed time of [start, end) inside the union of the windows.
func timeInside(windows []ClockWindow, start, end time.Time, loc *time.Location) time.Duration {
	if !start.Before(end) {
		return 0
	}
	first, last := start.In(loc), end.In(loc)
	// A window instance lasts at most one local day, so the one that started the day
	// before start is the earliest that can reach the range. Dates step in UTC, where
	// every day has 24 hours.
	day := time.Date(first.Year(), first.Month(), first.Day()-1, 0, 0, 0, 0, time.UTC)
	stop := time.Date(last.Year(), last.Month(), last.Day(), 0, 0, 0, 0, time.UTC)
	var spans []Interval
	for ; !day.After(stop); day = day.AddDate(0, 0, 1) {
		for _, w := range windows {
			from, to, ok := w.minutes()
			if !ok || (len(w.Days) > 0 && !slices.Contains(w.Days, day.Weekday())) {
				continue
			}
			y, m, d := day.Date()
			span := Interval{clockInstant(y, m, d, from, loc), clockInstant(y, m, d, to, loc)}
			if span, ok := span.Clip(start, end); ok {
				spans = append(spans, span)
			}
		}
	}
	return unionLength(spans)
}

// clockInstant is the instant at minute minutes after the local midnight starting day
// y-m-d in loc (minute may pass 24:00 into later days). A wall time that occurs twice
// means its first occurrence, and one skipped by a change of offset is read with the
// offset in force before the change, as RFC 5545 §3.3.5 specifies: 02:30 on a night
// clocks jump from 02:00 to 03:00 is 03:30. time.Date promises neither.
func clockInstant(y int, m time.Month, d, minute int, loc *time.Location) time.Time {
	naive := time.Date(y, m, d, 0, minute, 0, 0, time.UTC)
	// Offsets in force a day either side cover any one change of offset.
	_, before := naive.Add(-24 * time.Hour).In(loc).Zone()
	_, after := naive.Add(24 * time.Hour).In(loc).Zone()
	for _, offset := range []int{before, after} { // earlier offset first: first occurrence
		t := naive.Add(-time.Duration(offset) * time.Second).In(loc)
		if _, o := t.Zone(); o == offset {
			return t
		}
	}
	return naive.Add(-time.Duration(before) * time.Second).In(loc)
}
