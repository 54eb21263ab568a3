package scheduling

import (
	"slices"
	"strconv"
	"strings"
	"time"

	"beamledger"
)

// CostEntry is one of an instrument's costs for a fiscal year (a service contract, a
// salary share, supplies, depreciation), entered by a manager for the recovery report.
type CostEntry struct {
	ID           string    `json:"id"`
	InstrumentID string    `json:"instrument_id"`
	FiscalYear   int       `json:"fiscal_year"`
	Category     string    `json:"category"`
	AmountMinor  int64     `json:"amount_minor"`
	Note         string    `json:"note,omitempty"`
	EnteredBy    string    `json:"entered_by"`
	EnteredAt    time.Time `json:"entered_at"`
}

// Validate checks an entry, naming offending fields.
func (e CostEntry) Validate() error {
	fe := beamledger.FieldErrors{}
	if strings.TrimSpace(e.InstrumentID) == "" {
		fe.Add("instrument_id", "is required")
	}
	if e.FiscalYear < 2000 || e.FiscalYear > 2200 {
		fe.Add("fiscal_year", "must be a year between 2000 and 2200")
	}
	if c := strings.TrimSpace(e.Category); c == "" || len(c) > 100 {
		fe.Add("category", "is required (at most 100 characters)")
	}
	if e.AmountMinor < -maxAmountMinor || e.AmountMinor > maxAmountMinor {
		fe.Add("amount_minor", "is outside the range money may take")
	}
	if len(e.Note) > 1000 {
		fe.Add("note", "must be at most 1000 characters")
	}
	return fe.Err()
}

// FiscalYearBounds is fiscal year `year` in the facility's zone, [from, to), for a
// fiscal year starting on the first of startMonth. A fiscal year is named by the
// calendar year it ends in: with a July start, fiscal year 2026 runs from 1 July 2025
// to 1 July 2026. With a January start it is the calendar year.
func FiscalYearBounds(year, startMonth int, loc *time.Location) (from, to time.Time) {
	if startMonth < 1 || startMonth > 12 {
		startMonth = 1
	}
	first := year
	if startMonth > 1 {
		first = year - 1
	}
	from = time.Date(first, time.Month(startMonth), 1, 0, 0, 0, 0, loc)
	return from, from.AddDate(1, 0, 0)
}

// RecoveryLine compares one instrument's costs for a fiscal year with the charges
// issued for it. BalanceMinor = costs − charges: positive is under-recovery (a deficit
// to carry forward into the next rates), negative over-recovery (a surplus to give
// back), as REFERENCE §3 [published: 2 CFR 200.468] requires.
type RecoveryLine struct {
	InstrumentID string `json:"instrument_id"`
	CostsMinor   int64  `json:"costs_minor"`
	ChargedMinor int64  `json:"charged_minor"`
	BalanceMinor int64  `json:"balance_minor"`
	// RecoveredPermille is charges over costs in thousandths; 0 without costs.
	RecoveredPermille int `json:"recovered_permille"`
}

// Recovery builds the report's lines from costs and issued charges per instrument, in
// instrument id order; an instrument with either appears.
func Recovery(costs, charged map[string]int64) []RecoveryLine {
	ids := map[string]bool{}
	for id := range costs {
		ids[id] = true
	}
	for id := range charged {
		ids[id] = true
	}
	out := make([]RecoveryLine, 0, len(ids))
	for id := range ids {
		l := RecoveryLine{InstrumentID: id, CostsMinor: costs[id], ChargedMinor: charged[id]}
		l.BalanceMinor = l.CostsMinor - l.ChargedMinor
		if l.CostsMinor > 0 {
			l.RecoveredPermille = int(l.ChargedMinor * 1000 / l.CostsMinor)
		}
		out = append(out, l)
	}
	slices.SortFunc(out, func(a, b RecoveryLine) int { return strings.Compare(a.InstrumentID, b.InstrumentID) })
	return out
}

// UtilizationBooking is a booking as the utilization report reads it.
// The report needs no booking's identity, nor its usages': Usages may leave their ID
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

// UtilizationReport is how one instrument's time was used over [From, To).
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

// Utilization reports an instrument's use over [from, to): booked time of active
// bookings, used time from usage, no-show time, and time cancelled inside the
// cancellation window (not counting bookings a service booking displaced), each
// clipped to the range, per booking kind and per project. Service bookings are taken
// off the opening hours to give the available time. Quotas on the instrument are
// prorated over the range by the share of each quota period it covers.
func Utilization(instrumentID string, from, to time.Time, loc *time.Location, opening []ClockWindow,
	cancellationWindow time.Duration, bookings []UtilizationBooking, quotas []Quota, now time.Time) UtilizationReport {
	r := UtilizationReport{InstrumentID: instrumentID, From: from, To: to, OpeningMinutes: MinutesInside(opening, from, to, loc)}
	kinds := map[BookingKind]*UtilizationFigures{}
	projects := map[string]*UtilizationFigures{}
	clip := func(s, e time.Time) int {
		if iv, ok := (Interval{Start: s, End: e}).Clip(from, to); ok {
			return int(iv.End.Sub(iv.Start) / time.Minute)
		}
		return 0
	}
	var service []Interval
	for _, b := range bookings {
		if b.Kind == KindService {
			if b.Status == StatusActive {
				if iv, ok := (Interval{Start: b.Start, End: b.End}).Clip(from, to); ok {
					service = append(service, iv)
				}
			}
			continue
		}
		var f UtilizationFigures
		switch {
		case b.Status == StatusActive:
			f.BookedMinutes = clip(b.Start, b.End)
			if len(b.Usages) == 1 { // the usual case, without merging's allocations
				if s := b.Usages[0].Span(now); s.Start.Before(s.End) {
					f.UsedMinutes = clip(s.Start, s.End)
				}
			} else {
				for _, s := range mergeSpans(b.Usages, now) {
					f.UsedMinutes += clip(s.Start, s.End)
				}
			}
			if b.NoShow && len(b.Usages) == 0 {
				f.NoShowMinutes = f.BookedMinutes
			}
		case b.CancelledAt != nil && !b.Displaced && b.Start.Sub(*b.CancelledAt) < cancellationWindow:
			f.CancelledLateMinutes = clip(b.Start, b.End)
		}
		for _, dst := range []*UtilizationFigures{&r.UtilizationFigures, figures(kinds, b.Kind), figures(projects, b.ProjectID)} {
			dst.BookedMinutes += f.BookedMinutes
			dst.UsedMinutes += f.UsedMinutes
			dst.NoShowMinutes += f.NoShowMinutes
			dst.CancelledLateMinutes += f.CancelledLateMinutes
		}
	}
	for _, s := range mergeIntervals(service) {
		r.ServiceMinutes += MinutesInside(opening, s.Start, s.End, loc)
	}
	r.AvailableMinutes = max(r.OpeningMinutes-r.ServiceMinutes, 0)
	r.UptimePermille = permille(r.AvailableMinutes, r.OpeningMinutes)
	r.BookedPermille = permille(r.BookedMinutes, r.AvailableMinutes)
	for _, k := range BookingKinds {
		if f, ok := kinds[k]; ok {
			r.ByKind = append(r.ByKind, UtilizationKind{Kind: k, UtilizationFigures: *f})
		}
	}
	quota := prorateQuotas(instrumentID, from, to, loc, quotas)
	for id := range quota {
		figures(projects, id)
	}
	for id, f := range projects {
		p := UtilizationProject{ProjectID: id, UtilizationFigures: *f}
		if q, ok := quota[id]; ok {
			used := permille(f.UsedMinutes, q)
			p.QuotaMinutes, p.QuotaUsedPermille = &q, &used
		}
		r.ByProject = append(r.ByProject, p)
	}
	slices.SortFunc(r.ByProject, func(a, b UtilizationProject) int { return strings.Compare(a.ProjectID, b.ProjectID) })
	if r.ByKind == nil {
		r.ByKind = []UtilizationKind{}
	}
	if r.ByProject == nil {
		r.ByProject = []UtilizationProject{}
	}
	return r
}

func figures[K comparable](m map[K]*UtilizationFigures, k K) *UtilizationFigures {
	if m[k] == nil {
		m[k] = &UtilizationFigures{}
	}
	return m[k]
}

// mergeIntervals is the union of intervals, in time order.
func mergeIntervals(ivs []Interval) []Interval {
	ivs = slices.Clone(ivs)
	slices.SortFunc(ivs, compareInterval)
	var out []Interval
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
