package scheduling

import (
	"testing"
	"time"
)

func TestFiscalYearBounds(t *testing.T) {
	ny, err := time.LoadLocation("America/New_York")
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		year, start int
		from, to    time.Time
	}{
		// [constructed] a January start is the calendar year.
		{2026, 1, time.Date(2026, 1, 1, 0, 0, 0, 0, ny), time.Date(2027, 1, 1, 0, 0, 0, 0, ny)},
		// [practice] a fiscal year is named by the calendar year it ends in: with a July
		// start, 2026 is 1 July 2025 to 1 July 2026; with an October start, 1 October 2025
		// to 1 October 2026.
		{2026, 7, time.Date(2025, 7, 1, 0, 0, 0, 0, ny), time.Date(2026, 7, 1, 0, 0, 0, 0, ny)},
		{2026, 10, time.Date(2025, 10, 1, 0, 0, 0, 0, ny), time.Date(2026, 10, 1, 0, 0, 0, 0, ny)},
	} {
		from, to := FiscalYearBounds(c.year, c.start, ny)
		if !from.Equal(c.from) || !to.Equal(c.to) {
			t.Errorf("FY%d from month %d: %s to %s, want %s to %s", c.year, c.start, from, to, c.from, c.to)
		}
	}
	p := DefaultBillingPolicy()
	p.FiscalYearStartMonth = 0
	if err := p.Validate(); err == nil {
		t.Error("a fiscal year starting in month 0 passed validation")
	}
}
