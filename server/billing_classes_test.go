package server

import (
	"net/http"
	"slices"
	"testing"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// refClassRatesBody is REFERENCE §3's [constructed] rates with an external academic
// class beside the internal one: 217.00/h for instrument time (REFERENCE's external
// academic rate), half of it unattended (108.50, as 60.00 is half of 120.00), and staff
// at 65.00 × 1.55 = 100.75 [computed].
func refClassRatesBody() map[string]any {
	body := refRateBody(at(2026, 3, 1, 0, 0))
	body["classes"] = append(body["classes"].([]map[string]any), map[string]any{"rate_class": "external_academic",
		"independent_hourly_minor": 21700, "assisted_hourly_minor": 21700, "training_hourly_minor": 21700,
		"unattended_hourly_minor": 10850, "staff_hourly_minor": 10075})
	return body
}

// TestStatementPricesEachAccountAtItsClass runs REFERENCE §3's [constructed] month
// with GRANT-7, half of the split, an external grant billed at the external academic
// rates: its half of every charge is priced at that class, the other half at the
// internal project's class.
func TestStatementPricesEachAccountAtItsClass(t *testing.T) {
	w := newWorld(t)
	w.moveClock(at(2026, 2, 16, 9, 0))
	manager := w.tokens[accounts.RoleManager]
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/facility/billing-policy", manager, map[string]any{"unattended_cap_minor": 40000}, nil)
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments/"+w.instr.ID+"/rate-schedules", manager, refClassRatesBody(), nil)
	var accts []string
	for _, code := range []string{"GRANT-7", "CENTRE-2", "DEPT-1"} {
		var a scheduling.FundingAccount
		w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/funding-accounts", manager, map[string]any{"code": code}, &a)
		accts = append(accts, a.ID)
	}
	var grant scheduling.FundingAccount
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/funding-accounts/"+accts[0], manager, map[string]any{"rate_class": "external_academic"}, &grant)
	if grant.RateClass != "external_academic" {
		t.Fatalf("account after PATCH %+v", grant)
	}
	r := w.expect(http.StatusBadRequest, http.MethodPatch, "/api/v1/funding-accounts/"+accts[1], manager, map[string]any{"rate_class": "visiting"}, nil)
	if !fieldNamed(r, "rate_class") {
		t.Errorf("unknown class: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/projects/"+w.own.ID+"/funding", manager, map[string]any{"funding": []map[string]any{
		{"account_id": accts[0], "basis_points": 5000}, {"account_id": accts[1], "basis_points": 3000}, {"account_id": accts[2], "basis_points": 2000}}}, nil)
	w.referenceMonth()
	w.moveClock(at(2026, 4, 1, 10, 0))
	manager = w.tokens[accounts.RoleManager]
	var rec scheduling.StatementRecord
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-03"}, &rec)
	type line struct {
		rate, amount int64
		accounts     int
	}
	var got []line
	for _, l := range rec.Lines {
		got = append(got, line{l.HourlyRateMinor, l.AmountMinor, len(l.Allocations)})
	}
	// Each booking's external line (GRANT-7's half) comes first, then the internal one
	// (CENTRE-2 and DEPT-1, 30 % and 20 % of the whole).
	want := []line{
		// [constructed] 3 h: 3 × 217.00 = 651.00, half 325.50; 3 × 120.00 = 360.00, half 180.00.
		{21700, 32550, 1}, {12000, 18000, 2},
		// [constructed] 1 h minimum: 217.00 → 108.50; 120.00 → 60.00.
		{21700, 10850, 1}, {12000, 6000, 2},
		// [constructed] 2.5 h late cancellation: 542.50 → 271.25; 300.00 → 150.00.
		{21700, 27125, 1}, {12000, 15000, 2},
		// [constructed] 14 h unattended: 14 × 108.50 = 1 519.00 and 14 × 60.00 = 840.00,
		// each capped at 400.00 → 200.00 and 200.00.
		{10850, 20000, 1}, {6000, 20000, 2},
		// [constructed] 2 h assisted: 434.00 + 201.50 staff → 217.00 + 100.75; 240.00 + 130.00 → 120.00 + 65.00.
		{21700, 21700, 1}, {10075, 10075, 1}, {12000, 12000, 2}, {6500, 6500, 2},
	}
	if !slices.Equal(got, want) {
		t.Fatalf("lines\n got %+v\nwant %+v", got, want)
	}
	// [constructed] GRANT-7 325.50 + 108.50 + 271.25 + 200.00 + 217.00 + 100.75 = 1 223.00;
	// the internal half is REFERENCE §3's 1 550.00 × 50 %: 465.00 and 310.00 as before.
	wantAccounts := []scheduling.Allocation{{AccountID: accts[0], AmountMinor: 122300}, {AccountID: accts[1], AmountMinor: 46500}, {AccountID: accts[2], AmountMinor: 31000}}
	if !slices.Equal(rec.AccountTotals, wantAccounts) || rec.TotalMinor != 199800 {
		t.Errorf("account totals %v, total %d; want %v, 199800", rec.AccountTotals, rec.TotalMinor, wantAccounts)
	}
	if rec.Lines[0].Reason == "" || rec.Lines[0].Allocations[0].AccountID != accts[0] {
		t.Errorf("external line %+v: want GRANT-7 alone, with the class named", rec.Lines[0])
	}
	checkStatementCSV(t, w, rec.ID, 199800, 6+2*6)

	// Back to the project's class, GRANT-7 pays REFERENCE §3's 775.00 again.
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/funding-accounts/"+accts[0], manager, map[string]any{"rate_class": ""}, nil)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-03"}, &rec)
	if rec.TotalMinor != 155000 || rec.AccountTotals[0].AmountMinor != 77500 {
		t.Errorf("with the project's class: total %d, accounts %v", rec.TotalMinor, rec.AccountTotals)
	}
}
