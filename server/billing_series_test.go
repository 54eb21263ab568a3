package server

import (
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// weeklySeries is four weekly two-hour independent instances from first, for the
// researcher's project.
func (w *world) weeklySeries(first time.Time) map[string]any {
	return map[string]any{"instrument_id": w.instr.ID, "project_id": w.own.ID, "kind": "independent",
		"rrule": "FREQ=WEEKLY;COUNT=4;BYDAY=TU", "start": first.Format("2006-01-02T15:04"), "duration_minutes": 120}
}

// TestSeriesRefusesInstancesPastFundingValidity: every instance of a series is
// checked against its funding accounts' validity, and the report names the instances
// refused with the rule.
func TestSeriesRefusesInstancesPastFundingValidity(t *testing.T) {
	w := newWorld(t)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	first := w.nextTuesday(9, 0)
	fourth := first.AddDate(0, 0, 21)
	var a scheduling.FundingAccount
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/funding-accounts", manager,
		map[string]any{"code": "ENDING-2", "valid_until": first.AddDate(0, 0, 15)}, &a)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/projects/"+w.own.ID+"/funding", manager,
		map[string]any{"funding": []map[string]any{{"account_id": a.ID, "basis_points": 10000}}}, nil)

	body := w.weeklySeries(first)
	r := w.expect(http.StatusConflict, http.MethodPost, "/api/v1/series", researcher, body, nil)
	if !fieldNamed(r, "occurrence "+fourth.UTC().Format(time.RFC3339)) || !contains(r.Body, "ENDING-2 expires") {
		t.Errorf("series past the account's end: %s", r.Body)
	}
	body["book_free"] = true
	var res scheduling.SeriesResult
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/series", researcher, body, &res)
	if len(res.Booked) != 3 || len(res.Conflicts) != 1 || !res.Conflicts[0].Start.Equal(fourth) || res.Conflicts[0].Rule != "funding_account" {
		t.Errorf("booked %d, conflicts %+v; want the fourth refused for funding_account", len(res.Booked), res.Conflicts)
	}
}

// TestSeriesInstancesTakeAFundingCapInTurn: a series' instances are judged against a
// capped account one after another, each counting those booked before it.
func TestSeriesInstancesTakeAFundingCapInTurn(t *testing.T) {
	w := newWorld(t)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments/"+w.instr.ID+"/rate-schedules", manager, refRateBody(w.clock.Now().Add(time.Minute)), nil)
	var a scheduling.FundingAccount
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/funding-accounts", manager,
		map[string]any{"code": "CAP-S", "cap_minor": 50000}, &a)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/projects/"+w.own.ID+"/funding", manager,
		map[string]any{"funding": []map[string]any{{"account_id": a.ID, "basis_points": 10000}}}, nil)
	first := w.nextTuesday(9, 0)
	body := w.weeklySeries(first)
	body["book_free"] = true
	var res scheduling.SeriesResult
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/series", researcher, body, &res)
	// [constructed] 2 h at REFERENCE §3's 120.00/h = 240.00 an instance: two fit under
	// a cap of 500.00 (480.00), the third would take it to 720.00.
	if len(res.Booked) != 2 || len(res.Conflicts) != 2 || !res.Conflicts[0].Start.Equal(first.AddDate(0, 0, 14)) {
		t.Fatalf("booked %d, conflicts %+v", len(res.Booked), res.Conflicts)
	}
	for _, c := range res.Conflicts {
		if c.Rule != "funding_cap" || !contains([]byte(c.Message), "CAP-S") || !contains([]byte(c.Message), "48000 charged and committed") {
			t.Errorf("conflict %+v, want funding_cap on CAP-S after 480.00", c)
		}
	}
}
