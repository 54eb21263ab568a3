package scheduling

import (
	"slices"
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
