package scheduling

import (
	"cmp"
	"context"
	"slices"
	"strings"
	"time"

	"beamledger"
)

// Period is the span a quota allocates time over, read in the facility's zone.
type Period string

// Quota periods.
const (
	PeriodWeek    Period = "week"    // ISO week, from Monday 00:00 local
	PeriodMonth   Period = "month"   // calendar month, from the 1st 00:00 local
	PeriodQuarter Period = "quarter" // from 1 January, April, July or October 00:00 local
)

// Periods lists every period.
var Periods = []Period{PeriodWeek, PeriodMonth, PeriodQuarter}

// Valid reports whether p is one of Periods.
func (p Period) Valid() bool { return slices.Contains(Periods, p) }

// PeriodBounds returns the period of kind p that contains t, as [start, end) between
// local midnights in loc. The bounds are instants, so a week holding the autumn change
// of clocks lasts 169 h. A midnight that a change of offset skips is read with the offset
// before the change (see clockInstant). For an invalid p both bounds are t: an empty period.
func PeriodBounds(p Period, t time.Time, loc *time.Location) (start, end time.Time) {
	l := t.In(loc)
	y, m, d := l.Date()
	switch p {
	case PeriodWeek:
		d -= (int(l.Weekday()) + 6) % 7 // back to Monday
		return clockInstant(y, m, d, 0, loc), clockInstant(y, m, d+7, 0, loc)
	case PeriodMonth:
		return clockInstant(y, m, 1, 0, loc), clockInstant(y, m+1, 1, 0, loc)
	case PeriodQuarter:
		m -= (m - 1) % 3
		return clockInstant(y, m, 1, 0, loc), clockInstant(y, m+3, 1, 0, loc)
	}
	return t, t
}

// Quota is the instrument time a project is allocated per period.
type Quota struct {
	ProjectID        string `json:"project_id"`
	InstrumentID     string `json:"instrument_id"`
	Period           Period `json:"period"`
	AllocatedMinutes int    `json:"allocated_minutes"`
}

// Validate checks a quota, naming offending fields.
func (q Quota) Validate() error {
	fe := beamledger.FieldErrors{}
	if strings.TrimSpace(q.ProjectID) == "" {
		fe.Add("project_id", "is required")
	}
	if strings.TrimSpace(q.InstrumentID) == "" {
		fe.Add("instrument_id", "is required")
	}
	if !q.Period.Valid() {
		fe.Add("period", "must be one of week, month, quarter")
	}
	// A quarter has at most 92 days; more cannot be allocated.
	if q.AllocatedMinutes < 0 || q.AllocatedMinutes > 92*minutesPerDay {
		fe.Add("allocated_minutes", "must be between 0 and the minutes in a quarter (132480)")
	}
	return fe.Err()
}

// Interval is a half-open range of instants [Start, End).
type Interval struct {
	Start time.Time `json:"start"`
	End   time.Time `json:"end"`
}

// Clip returns the part of iv inside [from, to), and whether any is.
func (iv Interval) Clip(from, to time.Time) (Interval, bool) {
	if iv.Start.Before(from) {
		iv.Start = from
	}
	if iv.End.After(to) {
		iv.End = to
	}
	return iv, iv.Start.Before(iv.End)
}

// unionLength is the elapsed time covered by at least one of the non-empty spans
// (clip's results); overlaps count once. It sorts spans in place.
func unionLength(spans []Interval) time.Duration {
	slices.SortFunc(spans, func(a, b Interval) int { return a.Start.Compare(b.Start) })
	var total time.Duration
	var reach time.Time // end of the covered run so far
	for _, s := range spans {
		if s.Start.Before(reach) {
			if s.End.After(reach) {
				total += s.End.Sub(reach)
				reach = s.End
			}
			continue
		}
		total += s.End.Sub(s.Start)
		reach = s.End
	}
	return total
}

// ShareKey names one project's time on one instrument.
type ShareKey struct {
	ProjectID    string
	InstrumentID string
}

// ShareLine is one project's allocation and use of one instrument over a period.
// Shares are of the allocation in per mille, rounded half up; 0 when nothing is
// allocated, where the minutes tell the story.
type ShareLine struct {
	ProjectID        string    `json:"project_id"`
	InstrumentID     string    `json:"instrument_id"`
	PeriodStart      time.Time `json:"period_start"`
	PeriodEnd        time.Time `json:"period_end"`
	AllocatedMinutes int       `json:"allocated_minutes"`
	BookedMinutes    int       `json:"booked_minutes"`
	UsedMinutes      int       `json:"used_minutes"`
	BookedPermille   int       `json:"booked_permille"`
	UsedPermille     int       `json:"used_permille"`
}

// FairShare reports allocation against booked and used time for the period of kind p
// that contains at (in loc). Quotas for other kinds of period are ignored; two for the
// same project, instrument and period add up. Each interval is clipped to the period;
// overlapping intervals of one key count once, and minutes are whole, rounded down.
// There is a line for every key with a quota or with time in the period, ordered by
// project then instrument, so unallocated use shows too.
func FairShare(p Period, at time.Time, loc *time.Location, quotas []Quota, booked, used map[ShareKey][]Interval) []ShareLine {
	from, to := PeriodBounds(p, at, loc)
	lines := map[ShareKey]*ShareLine{}
	line := func(k ShareKey) *ShareLine {
		if lines[k] == nil {
			lines[k] = &ShareLine{ProjectID: k.ProjectID, InstrumentID: k.InstrumentID, PeriodStart: from, PeriodEnd: to}
		}
		return lines[k]
	}
	for _, q := range quotas {
		if q.Period == p {
			line(ShareKey{q.ProjectID, q.InstrumentID}).AllocatedMinutes += q.AllocatedMinutes
		}
	}
	minutesIn := func(ivs []Interval) int {
		var spans []Interval
		for _, iv := range ivs {
			if iv, ok := iv.Clip(from, to); ok {
				spans = append(spans, iv)
			}
		}
		return int(unionLength(spans) / time.Minute)
	}
	for k, ivs := range booked {
		if n := minutesIn(ivs); n > 0 {
			line(k).BookedMinutes = n
		}
	}
	for k, ivs := range used {
		if n := minutesIn(ivs); n > 0 {
			line(k).UsedMinutes = n
		}
	}
	out := make([]ShareLine, 0, len(lines))
	for _, l := range lines {
		l.BookedPermille, l.UsedPermille = permille(l.BookedMinutes, l.AllocatedMinutes), permille(l.UsedMinutes, l.AllocatedMinutes)
		out = append(out, *l)
	}
	slices.SortFunc(out, func(a, b ShareLine) int {
		return cmp.Or(strings.Compare(a.ProjectID, b.ProjectID), strings.Compare(a.InstrumentID, b.InstrumentID))
	})
	return out
}

// permille is part/whole in thousandths rounded half up, or 0 when whole is not positive.
func permille(part, whole int) int {
	if whole <= 0 {
		return 0
	}
	return (part*1000 + whole/2) / whole
}

// QuotaStore persists quotas and gathers what the fair-share report needs.
type QuotaStore interface {
	// SetQuota creates or replaces the quota of a project on an instrument for a kind
	// of period. ErrInvalid when the project or instrument is unknown.
	SetQuota(ctx context.Context, q Quota) (Quota, error)
	// Quotas lists quotas, of one project when projectID is set.
	Quotas(ctx context.Context, projectID string) ([]Quota, error)
	// ShareIntervals returns, per project and instrument, the active non-service
	// bookings and the usages that overlap [from, to); a usage still open ends at now.
	ShareIntervals(ctx context.Context, from, to, now time.Time) (booked, used map[ShareKey][]Interval, err error)
}
