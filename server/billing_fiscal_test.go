package server

import (
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// TestReportsFollowAFiscalYearStartingInJuly: with the facility's fiscal year starting
// in July, fiscal year 2026 runs from 1 July 2025 to 1 July 2026 in the facility's
// zone, and the recovery and utilization reports split June and July 2026 between
// fiscal years 2026 and 2027.
func TestReportsFollowAFiscalYearStartingInJuly(t *testing.T) {
	w := newWorld(t)
	w.moveClock(at(2026, 2, 16, 9, 0))
	w.billingSetup()
	manager := w.tokens[accounts.RoleManager]
	w.expect(http.StatusBadRequest, http.MethodPut, "/api/v1/facility/billing-policy", manager, map[string]any{"fiscal_year_start_month": 13}, nil)
	var pol policyAnswer
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/facility/billing-policy", manager,
		map[string]any{"unattended_cap_minor": 40000, "fiscal_year_start_month": 7}, &pol)
	if pol.Effective.FiscalYearStartMonth != 7 {
		t.Fatalf("policy %+v", pol.Effective)
	}
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	w.moveClock(at(2026, 6, 15, 9, 0))
	june := w.book(accounts.RoleResearcher, w.bookingBody(at(2026, 6, 30, 9, 0), at(2026, 6, 30, 12, 0), scheduling.KindIndependent))
	july := w.book(accounts.RoleResearcher, w.bookingBody(at(2026, 7, 1, 9, 0), at(2026, 7, 1, 11, 0), scheduling.KindIndependent))
	w.moveClock(at(2026, 6, 30, 12, 30))
	w.use(june, at(2026, 6, 30, 9, 0), at(2026, 6, 30, 12, 0))
	w.moveClock(at(2026, 7, 1, 11, 30))
	w.use(july, at(2026, 7, 1, 9, 0), at(2026, 7, 1, 11, 0))
	w.moveClock(at(2026, 8, 3, 10, 0))
	manager = w.tokens[accounts.RoleManager]
	for _, month := range []string{"2026-06", "2026-07"} {
		var st scheduling.StatementRecord
		w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": month}, &st)
		w.expect(http.StatusOK, http.MethodPost, "/api/v1/statements/"+st.ID+"/issue", manager, nil, nil)
	}

	auditor := w.tokens[accounts.RoleAuditor]
	for _, c := range []struct {
		year           string
		from, to       time.Time
		charged        int64
		bookedMinutes  int
		openingMinutes int
	}{
		// [constructed] June's 3 h at 120.00 = 360.00 falls in fiscal year 2026 and July's
		// 2 h (240.00) in 2027; [computed] 1 July 2025 to 1 July 2026 has 261 weekdays,
		// 1 July 2026 to 1 July 2027 has 261 as well: × 10 h of default opening = 156 600 min.
		{"2026", at(2025, 7, 1, 0, 0), at(2026, 7, 1, 0, 0), 36000, 180, 156600},
		{"2027", at(2026, 7, 1, 0, 0), at(2027, 7, 1, 0, 0), 24000, 120, 156600},
	} {
		var rep recoveryAnswer
		w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/recovery?fiscal_year="+c.year, auditor, nil, &rep)
		if !rep.From.Equal(c.from) || !rep.To.Equal(c.to) || len(rep.Lines) != 1 || rep.Lines[0].ChargedMinor != c.charged {
			t.Errorf("recovery %s: %s to %s, lines %+v; want %s to %s charging %d", c.year, rep.From, rep.To, rep.Lines, c.from, c.to, c.charged)
		}
		var u scheduling.UtilizationReport
		w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/utilization?instrument_id="+w.instr.ID+"&fiscal_year="+c.year, auditor, nil, &u)
		if !u.From.Equal(c.from) || !u.To.Equal(c.to) || u.BookedMinutes != c.bookedMinutes || u.OpeningMinutes != c.openingMinutes {
			t.Errorf("utilization %s: %s to %s, booked %d, opening %d", c.year, u.From, u.To, u.BookedMinutes, u.OpeningMinutes)
		}
	}
	r := w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/reports/utilization?instrument_id="+w.instr.ID+"&fiscal_year=2026&from=2026-01-01&to=2026-02-01", auditor, nil, nil)
	if !fieldNamed(r, "fiscal_year") {
		t.Errorf("both a fiscal year and dates: %s", r.Body)
	}
}
