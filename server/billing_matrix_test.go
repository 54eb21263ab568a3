package server

import (
	"bytes"
	"context"
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// matrixFundingAccount gives the foreign project one funding account, made on first use.
func matrixFundingAccount(w *world) map[string]string {
	w.t.Helper()
	ctx := context.Background()
	as, err := w.db.FundingAccounts(ctx, w.foreign.ID)
	if err != nil {
		w.t.Fatal(err)
	}
	if len(as) == 0 {
		a, err := w.db.SaveFundingAccount(ctx, scheduling.FundingAccount{ProjectID: w.foreign.ID, Code: "MATRIX-1"}, w.users[accounts.RoleManager].ID, w.clock.Now())
		if err != nil {
			w.t.Fatal(err)
		}
		as = append(as, a)
	}
	return map[string]string{":account_id": as[0].ID}
}

// matrixFundingBody puts all of a charge on the foreign project's account.
func matrixFundingBody(w *world) any {
	return map[string]any{"funding": []map[string]any{{"account_id": matrixFundingAccount(w)[":account_id"], "basis_points": 10000}}}
}

// matrixStatement is the foreign project's draft statement for January 2026 (no
// charges), made on first use.
func matrixStatement(w *world) map[string]string {
	w.t.Helper()
	ctx := context.Background()
	from, to := scheduling.PeriodBounds(scheduling.PeriodMonth, at(2026, 1, 15, 12, 0), berlin)
	st, _, err := w.db.ComputeStatement(ctx, w.foreign.ID, from, to, w.users[accounts.RoleManager].ID, w.clock.Now())
	if err != nil {
		w.t.Fatal(err)
	}
	return map[string]string{":statement_id": st.Record().ID}
}

// refRateInputs is REFERENCE §3's [constructed] rate-setting example, in cents.
func refRateInputs() map[string]any {
	return map[string]any{
		"service_contract_minor": 9600000, "salary_minor": 8400000, "salary_share_basis_points": 5000,
		"fringe_rate_basis_points": 3100, "supplies_minor": 1098000, "purchase_minor": 120000000,
		"federal_share_minor": 72000000, "useful_life_years": 10, "prior_period_balance_minor": 1400000,
		"projected_billable_hours": 1600, "subsidy_minor": 3200000, "f_and_a_basis_points": 5500,
		"commercial_multiplier_basis_points": 15000,
	}
}

// exerciseBilling calls every cost-recovery route with success and with an error. It
// takes a world of its own: the shared one's rules and calendar were changed by the
// exercises before it.
func exerciseBilling(t *testing.T, _ *world) {
	w := newWorld(t)
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	inst := "/api/v1/instruments/" + w.instr.ID
	now := w.clock.Now()
	w.expect(http.StatusCreated, http.MethodPost, inst+"/rate-schedules", manager, refRateBody(now.Add(time.Minute)), nil)
	w.expect(http.StatusBadRequest, http.MethodPost, inst+"/rate-schedules", manager, refRateBody(now.Add(-time.Hour)), nil)
	w.expect(http.StatusConflict, http.MethodPost, inst+"/rate-schedules", manager, refRateBody(now.Add(time.Minute)), nil)
	w.expect(http.StatusOK, http.MethodGet, inst+"/rate-schedules", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/instruments/nope/rate-schedules", researcher, nil, nil)

	w.expect(http.StatusOK, http.MethodPut, "/api/v1/facility/billing-policy", manager, map[string]any{"unattended_cap_minor": 40000}, nil)
	w.expect(http.StatusBadRequest, http.MethodPut, "/api/v1/facility/billing-policy", manager, map[string]any{"increment_minutes": 0}, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/facility/billing-policy", researcher, nil, nil)
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/facility/billing-policy", "", nil, nil)
	w.expect(http.StatusForbidden, http.MethodPut, "/api/v1/facility/billing-policy", researcher, map[string]any{}, nil)
	w.expect(http.StatusOK, http.MethodPut, inst+"/billing-policy", manager, map[string]any{"minimum_minutes": 30}, nil)
	w.expect(http.StatusBadRequest, http.MethodPut, inst+"/billing-policy", manager, map[string]any{"basis": "whatever"}, nil)
	w.expect(http.StatusOK, http.MethodGet, inst+"/billing-policy", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/instruments/nope/billing-policy", researcher, nil, nil)

	own := "/api/v1/projects/" + w.own.ID
	var a scheduling.FundingAccount
	w.expect(http.StatusCreated, http.MethodPost, own+"/funding-accounts", manager, map[string]any{"code": "EX-1"}, &a)
	w.expect(http.StatusConflict, http.MethodPost, own+"/funding-accounts", manager, map[string]any{"code": "EX-1"}, nil)
	w.expect(http.StatusOK, http.MethodGet, own+"/funding-accounts", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/projects/"+w.foreign.ID+"/funding-accounts", researcher, nil, nil)
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/funding-accounts/"+a.ID, manager, map[string]any{"cap_minor": 1000000}, nil)
	w.expect(http.StatusBadRequest, http.MethodPatch, "/api/v1/funding-accounts/"+a.ID, manager, map[string]any{"cap_minor": -1}, nil)
	split := map[string]any{"funding": []map[string]any{{"account_id": a.ID, "basis_points": 10000}}}
	w.expect(http.StatusOK, http.MethodPut, own+"/funding", manager, split, nil)
	r := w.expect(http.StatusBadRequest, http.MethodPut, own+"/funding", manager, map[string]any{"funding": []map[string]any{{"account_id": a.ID, "basis_points": 9000}}}, nil)
	if !fieldNamed(r, "funding") {
		t.Errorf("a split of 90 %% names no field: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodGet, own+"/funding", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/projects/"+w.foreign.ID+"/funding", researcher, nil, nil)

	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	start := w.nextTuesday(9, 0)
	var b bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), &b)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/bookings/"+b.ID+"/funding", manager, split, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/bookings/"+b.ID+"/funding", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/bookings/nope/funding", researcher, nil, nil)
	var late scheduling.FundingAccount
	w.expect(http.StatusCreated, http.MethodPost, own+"/funding-accounts", manager, map[string]any{"code": "EX-2", "valid_from": start.Add(24 * time.Hour)}, &late)
	w.expect(http.StatusUnprocessableEntity, http.MethodPut, "/api/v1/bookings/"+b.ID+"/funding", manager,
		map[string]any{"funding": []map[string]any{{"account_id": late.ID, "basis_points": 10000}}}, nil)

	w.expect(http.StatusCreated, http.MethodPost, own+"/adjustments", manager, map[string]any{"amount_minor": -500, "reason": "goodwill credit"}, nil)
	r = w.expect(http.StatusBadRequest, http.MethodPost, own+"/adjustments", manager, map[string]any{"amount_minor": 0, "reason": ""}, nil)
	if !fieldNamed(r, "amount_minor") || !fieldNamed(r, "reason") {
		t.Errorf("adjustment errors: %s", r.Body)
	}

	month := start.In(berlin).Format("2006-01")
	var st scheduling.StatementRecord
	w.expect(http.StatusCreated, http.MethodPost, own+"/statements", manager, map[string]string{"month": month}, &st)
	w.expect(http.StatusOK, http.MethodPost, own+"/statements", manager, map[string]string{"month": month}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, own+"/statements", manager, map[string]string{"month": "March"}, nil)
	w.expect(http.StatusOK, http.MethodGet, own+"/statements", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/projects/"+w.foreign.ID+"/statements", researcher, nil, nil)
	for _, f := range []string{"", "?format=csv", "?format=html"} {
		w.expect(http.StatusOK, http.MethodGet, "/api/v1/statements/"+st.ID+f, researcher, nil, nil)
	}
	pdf := w.expect(http.StatusOK, http.MethodGet, "/api/v1/statements/"+st.ID+"?format=pdf", researcher, nil, nil)
	if pdf.Header.Get("Content-Type") != "application/pdf" || !bytes.HasPrefix(pdf.Body, []byte("%PDF-")) {
		t.Errorf("statement as PDF: %s, %.20q", pdf.Header.Get("Content-Type"), pdf.Body)
	}
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/statements/"+st.ID+"?format=pdf", w.login(w.other.Email, testPassword).AccessToken, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/statements/"+st.ID+"?format=xml", researcher, nil, nil)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/statements/"+st.ID+"/issue", manager, nil, nil)
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/statements/"+st.ID+"/issue", manager, nil, nil)
	w.expect(http.StatusConflict, http.MethodPost, own+"/statements", manager, map[string]string{"month": month}, nil)
	// A booking that cannot be priced (no rate schedule of its instrument in force
	// when it started) is answered 422 naming the rule.
	past := "/api/v1/projects/" + w.foreign.ID + "/statements"
	w.pastBooking(w.instr.ID, w.foreign.ID, w.other.ID)
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPost, past, manager, map[string]string{"month": now.In(berlin).Format("2006-01")}, nil)
	if !contains(r.Body, "rate_schedule_in_force") {
		t.Errorf("unpriced booking: %s", r.Body)
	}

	calc := refRateInputs()
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/rate-calculations", manager, calc, nil)
	calc["save"] = map[string]any{"instrument_id": w.instr.ID, "effective_from": now.Add(48 * time.Hour), "staff_hourly_minor": 6500}
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/rate-calculations", manager, calc, nil)
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/rate-calculations", manager, calc, nil)
	calc["projected_billable_hours"] = 0
	r = w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/rate-calculations", manager, calc, nil)
	if !fieldNamed(r, "projected_billable_hours") {
		t.Errorf("calculator error: %s", r.Body)
	}

	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/cost-entries", manager,
		map[string]any{"instrument_id": w.instr.ID, "fiscal_year": 2026, "category": "service_contract", "amount_minor": 9600000}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/cost-entries", manager,
		map[string]any{"instrument_id": w.instr.ID, "fiscal_year": 1900, "category": "", "amount_minor": 1}, nil)
	auditor := w.tokens[accounts.RoleAuditor]
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/recovery?fiscal_year=2026", auditor, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/reports/recovery?fiscal_year=next", auditor, nil, nil)
	u := "/api/v1/reports/utilization?instrument_id=" + w.instr.ID + "&from=2026-03-01&to=2026-04-01"
	w.expect(http.StatusOK, http.MethodGet, u, auditor, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, u+"&format=csv", auditor, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/reports/utilization?instrument_id="+w.instr.ID+"&from=2026-03-01&to=soon", auditor, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/reports/utilization?instrument_id=nope&from=2026-03-01&to=2026-04-01", auditor, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/facility-utilization?fiscal_year=2026", auditor, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/facility-utilization?from=2026-03-01&to=2026-04-01&format=csv", auditor, nil, nil)
	if r := w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/reports/facility-utilization?from=2026-03-01&to=2027-06-01", auditor, nil, nil); !fieldNamed(r, "to") {
		t.Errorf("a range over 400 days not named: %s", r.Body)
	}
}
