package scheduling

import (
	"slices"
	"strconv"
	"strings"
	"time"
)

// UtilizationBooking is a booking as the utilization report's rules read it.
// The rules need no booking's identity, nor its usages': Usages may leave their ID
// and BookingID empty.
type UtilizationBooking struct {
	ProjectID   string
	Kind        BookingKind
	Start, End  time.Time
	Status      BookingStatus
	CancelledAt *time.Time
	Displaced   bool // cancelled by a service booking: not the project's late cancellation
	NoShow      bool
	Usages      []Usage
}

// UtilizationTotals is the elapsed time one project's bookings of one kind took on an
// instrument inside a report's range, before any rounding: booked time of active
// bookings, used time from their usage, booked time of no-shows, and booked time
// cancelled inside the cancellation window.
type UtilizationTotals struct {
	ProjectID                           string
	Kind                                BookingKind
	Booked, Used, NoShow, CancelledLate time.Duration
}

// UtilizationSums is what an instrument's report is made of: the totals per project
// and kind, and the active service bookings clipped to the range (which take time off
// the opening hours instead of counting as use).
type UtilizationSums struct {
	Totals  []UtilizationTotals
	Service []Interval
}

// SumUtilization applies the report's rules to bookings that overlap [from, to):
//   - an active booking counts its booked time and its used time (the union of its
//     usage spans, an open one until now), each clipped to the range; booked time with
//     no usage at all after a detected no-show is also no-show time;
//   - a cancelled booking counts its booked time, clipped, as cancelled late when it
//     was cancelled less than cancellationWindow before its start, unless a service
//     booking displaced it;
//   - an active service booking is listed, clipped, in Service.
//
// The store computes the same sums in one aggregate query over a facility's bookings;
// tests hold the two to the same answers.
func SumUtilization(from, to time.Time, cancellationWindow time.Duration, bookings []UtilizationBooking, now time.Time) UtilizationSums {
	type key struct {
		project string
		kind    BookingKind
	}
	var out UtilizationSums
	at := map[key]int{}
	clip := func(s, e time.Time) time.Duration {
		if iv, ok := (Interval{Start: s, End: e}).Clip(from, to); ok {
			return iv.End.Sub(iv.Start)
		}
		return 0
	}
	for _, b := range bookings {
		if b.Kind == KindService {
			if iv, ok := (Interval{Start: b.Start, End: b.End}).Clip(from, to); ok && b.Status == StatusActive {
				out.Service = append(out.Service, iv)
			}
			continue
		}
		t := UtilizationTotals{ProjectID: b.ProjectID, Kind: b.Kind}
		switch {
		case b.Status == StatusActive:
			t.Booked = clip(b.Start, b.End)
			for _, s := range mergeSpans(nil, b.Usages, now) {
				t.Used += clip(s.Start, s.End)
			}
			if b.NoShow && len(b.Usages) == 0 {
				t.NoShow = t.Booked
			}
		case b.CancelledAt != nil && !b.Displaced && b.Start.Sub(*b.CancelledAt) < cancellationWindow:
			t.CancelledLate = clip(b.Start, b.End)
		}
		k := key{b.ProjectID, b.Kind}
		i, ok := at[k]
		if !ok {
			i = len(out.Totals)
			at[k] = i
			out.Totals = append(out.Totals, UtilizationTotals{ProjectID: b.ProjectID, Kind: b.Kind})
		}
		out.Totals[i].add(t)
	}
	return out
}

func (t *UtilizationTotals) add(o UtilizationTotals) {
	t.Booked += o.Booked
	t.Used += o.Used
	t.NoShow += o.NoShow
	t.CancelledLate += o.CancelledLate
}

// figures turns totals into whole minutes, each rounded down once.
func (t UtilizationTotals) figures() UtilizationFigures {
	return UtilizationFigures{BookedMinutes: int(t.Booked / time.Minute), UsedMinutes: int(t.Used / time.Minute),
		NoShowMinutes: int(t.NoShow / time.Minute), CancelledLateMinutes: int(t.CancelledLate / time.Minute)}
}

// UtilizationFigures are the minutes of one slice of the report.
type UtilizationFigures struct {
	BookedMinutes        int `json:"booked_minutes"`
	UsedMinutes          int `json:"used_minutes"`
	NoShowMinutes        int `json:"no_show_minutes"`
	CancelledLateMinutes int `json:"cancelled_late_minutes"`
}

// UtilizationKind is the figures of one booking kind.
type UtilizationKind struct {
	Kind BookingKind `json:"kind"`
	UtilizationFigures
}

// UtilizationProject is one project's figures, with its quota over the period.
type UtilizationProject struct {
	ProjectID string `json:"project_id"`
	UtilizationFigures
	// QuotaMinutes is the project's allocation on the instrument pro rata over the
	// report's range (nil without a quota); QuotaUsedPermille is used over it.
	QuotaMinutes      *int `json:"quota_minutes,omitempty"`
	QuotaUsedPermille *int `json:"quota_used_permille,omitempty"`
}

// UtilizationReport is how one instrument's time was used over [From, To). Each
// figure is its summed elapsed time in whole minutes, rounded down once, so the
// figures of the kinds or of the projects may add up to a few minutes less than the
// instrument's.
type UtilizationReport struct {
	InstrumentID string    `json:"instrument_id"`
	From         time.Time `json:"from"`
	To           time.Time `json:"to"`
	// OpeningMinutes are the opening hours in the range; ServiceMinutes the part of
	// them service bookings took; AvailableMinutes the rest.
	OpeningMinutes   int `json:"opening_minutes"`
	ServiceMinutes   int `json:"service_minutes"`
	AvailableMinutes int `json:"available_minutes"`
	UtilizationFigures
	// UptimePermille is available over opening minutes, in thousandths.
	UptimePermille int `json:"uptime_permille"`
	// BookedPermille is booked over available minutes, in thousandths.
	BookedPermille int                  `json:"booked_permille"`
	ByKind         []UtilizationKind    `json:"by_kind"`
	ByProject      []UtilizationProject `json:"by_project"`
}

// Utilization reports an instrument's use over [from, to) from its sums (see
// SumUtilization): the figures per booking kind and per project and in all, the
// opening hours in the facility's zone less the service time inside them, and each
// project's quota on the instrument prorated over the range by the share of each
// quota period it covers.
func Utilization(instrumentID string, from, to time.Time, loc *time.Location, opening []ClockWindow,
	sums UtilizationSums, quotas []Quota) UtilizationReport {
	r := UtilizationReport{InstrumentID: instrumentID, From: from, To: to, OpeningMinutes: MinutesInside(opening, from, to, loc)}
	var all UtilizationTotals
	kinds := map[BookingKind]*UtilizationTotals{}
	projects := map[string]*UtilizationTotals{}
	for _, t := range sums.Totals {
		all.add(t)
		totals(kinds, t.Kind).add(t)
		totals(projects, t.ProjectID).add(t)
	}
	r.UtilizationFigures = all.figures()
	for _, s := range mergeIntervals(slices.Clone(sums.Service)) {
		r.ServiceMinutes += MinutesInside(opening, s.Start, s.End, loc)
	}
	r.AvailableMinutes = max(r.OpeningMinutes-r.ServiceMinutes, 0)
	r.UptimePermille = permille(r.AvailableMinutes, r.OpeningMinutes)
	r.BookedPermille = permille(r.BookedMinutes, r.AvailableMinutes)
	r.ByKind = []UtilizationKind{}
	for _, k := range BookingKinds {
		if t, ok := kinds[k]; ok {
			r.ByKind = append(r.ByKind, UtilizationKind{Kind: k, UtilizationFigures: t.figures()})
		}
	}
	quota := prorateQuotas(instrumentID, from, to, loc, quotas)
	for id := range quota {
		totals(projects, id)
	}
	r.ByProject = make([]UtilizationProject, 0, len(projects))
	for id, t := range projects {
		p := UtilizationProject{ProjectID: id, UtilizationFigures: t.figures()}
		if q, ok := quota[id]; ok {
			used := permille(p.UsedMinutes, q)
			p.QuotaMinutes, p.QuotaUsedPermille = &q, &used
		}
		r.ByProject = append(r.ByProject, p)
	}
	slices.SortFunc(r.ByProject, func(a, b UtilizationProject) int { return strings.Compare(a.ProjectID, b.ProjectID) })
	return r
}

func totals[K comparable](m map[K]*UtilizationTotals, k K) *UtilizationTotals {
	if m[k] == nil {
		m[k] = &UtilizationTotals{}
	}
	return m[k]
}

// mergeIntervals is the union of intervals, in time order. It sorts ivs in place.
func mergeIntervals(ivs []Interval) []Interval {
	slices.SortFunc(ivs, compareInterval)
	out := ivs[:0] // written no faster than read
	for _, s := range ivs {
		if n := len(out); n > 0 && !s.Start.After(out[n-1].End) {
			if s.End.After(out[n-1].End) {
				out[n-1].End = s.End
			}
			continue
		}
		out = append(out, s)
	}
	return out
}

// prorateQuotas gives each project's allocation on the instrument over [from, to):
// every quota period the range touches contributes its allocation times the share of
// the period's elapsed time inside the range, rounded down to whole minutes.
func prorateQuotas(instrumentID string, from, to time.Time, loc *time.Location, quotas []Quota) map[string]int {
	out := map[string]int{}
	for _, q := range quotas {
		if q.InstrumentID != instrumentID || !q.Period.Valid() {
			continue
		}
		total := int64(0)
		for at := from; at.Before(to); {
			ps, pe := PeriodBounds(q.Period, at, loc)
			if iv, ok := (Interval{Start: ps, End: pe}).Clip(from, to); ok {
				total += int64(q.AllocatedMinutes) * int64(iv.End.Sub(iv.Start)/time.Second) / int64(pe.Sub(ps)/time.Second)
			}
			at = pe
		}
		out[q.ProjectID] += int(total)
	}
	return out
}

// UtilizationCSVColumns are the columns of WriteUtilizationCSV: one row for the whole
// instrument (scope "instrument"), one per booking kind ("kind") and one per project
// ("project"). Add new columns at the end only.
func UtilizationCSVColumns() []string {
	return []string{"instrument_id", "from", "to", "scope", "key", "opening_minutes", "service_minutes",
		"available_minutes", "booked_minutes", "used_minutes", "no_show_minutes", "cancelled_late_minutes",
		"uptime_permille", "quota_minutes", "quota_used_permille"}
}

// UtilizationRows lays the report out as UtilizationCSVColumns rows.
func (r UtilizationReport) UtilizationRows() [][]string {
	itoa := strconv.Itoa
	opt := func(v *int) string {
		if v == nil {
			return ""
		}
		return itoa(*v)
	}
	head := []string{r.InstrumentID, r.From.UTC().Format(time.RFC3339), r.To.UTC().Format(time.RFC3339)}
	row := func(scope, key string, f UtilizationFigures, extra ...string) []string {
		out := append(append([]string{}, head...), scope, key)
		if scope == "instrument" {
			out = append(out, itoa(r.OpeningMinutes), itoa(r.ServiceMinutes), itoa(r.AvailableMinutes))
		} else {
			out = append(out, "", "", "")
		}
		out = append(out, itoa(f.BookedMinutes), itoa(f.UsedMinutes), itoa(f.NoShowMinutes), itoa(f.CancelledLateMinutes))
		return append(out, extra...)
	}
	rows := [][]string{row("instrument", r.InstrumentID, r.UtilizationFigures, itoa(r.UptimePermille), "", "")}
	for _, k := range r.ByKind {
		rows = append(rows, row("kind", string(k.Kind), k.UtilizationFigures, "", "", ""))
	}
	for _, p := range r.ByProject {
		rows = append(rows, row("project", p.ProjectID, p.UtilizationFigures, "", opt(p.QuotaMinutes), opt(p.QuotaUsedPermille)))
	}
	return rows
}
