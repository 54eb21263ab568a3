package server

import (
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// capSetup gives the world REFERENCE §3's rates from 1 March 2026 and splits the
// researcher's project 50/50 between a capped account and an uncapped one. It returns
// the capped and the uncapped account's ids.
func (w *world) capSetup(capMinor int64) (capID, openID string) {
	w.t.Helper()
	manager := w.tokens[accounts.RoleManager]
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments/"+w.instr.ID+"/rate-schedules", manager, refRateBody(at(2026, 3, 1, 0, 0)), nil)
	var capped, open scheduling.FundingAccount
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/funding-accounts", manager,
		map[string]any{"code": "CAP-1", "cap_minor": capMinor}, &capped)
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/funding-accounts", manager,
		map[string]any{"code": "OPEN-1"}, &open)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/projects/"+w.own.ID+"/funding", manager, map[string]any{"funding": []map[string]any{
		{"account_id": capped.ID, "basis_points": 5000}, {"account_id": open.ID, "basis_points": 5000}}}, nil)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	return capped.ID, open.ID
}

// TestFundingCapRefusesBookings: a capped account refuses a booking, or a move that
// adds cost, whose estimated share would take its charged and committed total past the
// cap; what issued statements charged counts at the amounts issued.
func TestFundingCapRefusesBookings(t *testing.T) {
	w := newWorld(t)
	w.moveClock(at(2026, 2, 16, 9, 0))
	capID, openID := w.capSetup(30000)
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	independent := func(start, end time.Time) map[string]any {
		return w.bookingBody(start, end, scheduling.KindIndependent)
	}

	// [constructed] at 120.00/h under the default policy, half to CAP-1 (cap 300.00):
	// 3 h → 360.00 → 180.00 on CAP-1; 1 h → 60.00, 240.00 committed in all.
	a := w.book(accounts.RoleResearcher, independent(at(2026, 3, 2, 9, 0), at(2026, 3, 2, 12, 0)))
	b := w.book(accounts.RoleResearcher, independent(at(2026, 3, 3, 9, 0), at(2026, 3, 3, 10, 0)))
	// [constructed] 1.5 h → 180.00 → 90.00: 240.00 + 90.00 = 330.00 passes 300.00.
	r := w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/bookings", researcher, independent(at(2026, 3, 4, 9, 0), at(2026, 3, 4, 10, 30)), nil)
	if !contains(r.Body, `"rule":"funding_cap"`) || !contains(r.Body, "CAP-1") || !contains(r.Body, "24000 charged and committed") ||
		!contains(r.Body, "share of 9000") || !fieldNamed(r, "funding") {
		t.Errorf("booking past the cap: %s", r.Body)
	}
	// [constructed] 30 min → the 1 h minimum → 60.00: 300.00 is exactly the cap, allowed.
	c := w.book(accounts.RoleResearcher, independent(at(2026, 3, 4, 9, 0), at(2026, 3, 4, 9, 30)))
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+c+"/cancel", researcher, map[string]string{"reason": "plans changed"}, nil)

	// With the cap lowered below what is committed, a move that costs no more passes;
	// an extension that adds cost does not: 180.00 (A) + 90.00 (B at 1.5 h) > 200.00.
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/funding-accounts/"+capID, manager, map[string]any{"cap_minor": 20000}, nil)
	move := func(start, end time.Time) map[string]string {
		return map[string]string{"start": start.Format(time.RFC3339), "end": end.Format(time.RFC3339), "reason": "specimen late"}
	}
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/bookings/"+a, researcher, move(at(2026, 3, 5, 9, 0), at(2026, 3, 5, 12, 0)), nil)
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPatch, "/api/v1/bookings/"+b, researcher, move(at(2026, 3, 3, 9, 0), at(2026, 3, 3, 10, 30)), nil)
	if !contains(r.Body, `"rule":"funding_cap"`) || !contains(r.Body, "CAP-1") {
		t.Errorf("extension past the cap: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/funding-accounts/"+capID, manager, map[string]any{"cap_minor": 30000}, nil)

	// March is used and issued: A ran 40 min over (3 h 45 min → 450.00 → 225.00 on
	// CAP-1), B as booked (60.00): 285.00 charged.
	w.moveClock(at(2026, 3, 3, 10, 30))
	w.use(b, at(2026, 3, 3, 9, 0), at(2026, 3, 3, 10, 0))
	w.moveClock(at(2026, 3, 5, 13, 0))
	w.use(a, at(2026, 3, 5, 9, 0), at(2026, 3, 5, 12, 40))
	w.moveClock(at(2026, 4, 1, 10, 0))
	manager, researcher = w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	var st scheduling.StatementRecord
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-03"}, &st)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/statements/"+st.ID+"/issue", manager, nil, nil)
	// [constructed] 285.00 charged + 60.00 for 1 h in April = 345.00 > 300.00: refused,
	// though the March bookings' estimates (180.00 + 60.00) would have left room.
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/bookings", researcher, independent(at(2026, 4, 7, 9, 0), at(2026, 4, 7, 10, 0)), nil)
	if !contains(r.Body, `"rule":"funding_cap"`) || !contains(r.Body, "28500 charged and committed") {
		t.Errorf("booking past the cap after an issued month: %s", r.Body)
	}
	// Raised by a manager, the cap makes room again.
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/funding-accounts/"+capID, manager, map[string]any{"cap_minor": 34500}, nil)
	w.book(accounts.RoleResearcher, independent(at(2026, 4, 7, 9, 0), at(2026, 4, 7, 10, 0)))

	// A booking's own split is judged the same way. With the project's default split
	// moved to OPEN-1 the 7 April booking goes there too, leaving CAP-1 at 285.00
	// charged; [constructed] 1 h all on CAP-1 → 120.00: 405.00 passes 345.00.
	only := func(id string) map[string]any {
		return map[string]any{"funding": []map[string]any{{"account_id": id, "basis_points": 10000}}}
	}
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/projects/"+w.own.ID+"/funding", manager, only(openID), nil)
	d := w.book(accounts.RoleResearcher, independent(at(2026, 4, 8, 9, 0), at(2026, 4, 8, 10, 0)))
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPut, "/api/v1/bookings/"+d+"/funding", manager, only(capID), nil)
	if !contains(r.Body, `"rule":"funding_cap"`) || !contains(r.Body, "28500 charged and committed") || !contains(r.Body, "share of 12000") {
		t.Errorf("split onto a full account: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/bookings/"+d+"/funding", manager, only(openID), nil)
}

// TestFundingCapCountsLateCancellation: a booking cancelled late still commits its
// late-cancellation charge to a capped account until a statement is issued, so the
// room it leaves is only what the cancellation does not charge.
func TestFundingCapCountsLateCancellation(t *testing.T) {
	w := newWorld(t)
	w.moveClock(at(2026, 2, 16, 9, 0))
	w.capSetup(30000)
	researcher := w.tokens[accounts.RoleResearcher]
	independent := func(start, end time.Time) map[string]any {
		return w.bookingBody(start, end, scheduling.KindIndependent)
	}
	// [constructed] at 120.00/h, half to CAP-1 (cap 300.00): 3 h → 180.00; 1 h → 60.00.
	w.book(accounts.RoleResearcher, independent(at(2026, 3, 2, 9, 0), at(2026, 3, 2, 12, 0)))
	b := w.book(accounts.RoleResearcher, independent(at(2026, 3, 3, 9, 0), at(2026, 3, 3, 10, 0)))
	// Cancelled 4 h before its start, inside REFERENCE §3's 24 h window: [constructed]
	// the booked hour is still charged, 120.00 → 60.00 on CAP-1, so 240.00 stays
	// committed and a 1.5 h booking (90.00) would pass the cap.
	w.moveClock(at(2026, 3, 3, 5, 0))
	researcher = w.tokens[accounts.RoleResearcher]
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+b+"/cancel", researcher, map[string]string{"reason": "sample broke"}, nil)
	r := w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/bookings", researcher, independent(at(2026, 3, 4, 9, 0), at(2026, 3, 4, 10, 30)), nil)
	if !contains(r.Body, `"rule":"funding_cap"`) || !contains(r.Body, "24000 charged and committed") {
		t.Errorf("booking past the cap with a late cancellation committed: %s", r.Body)
	}
	// [constructed] 30 min → the 1 h minimum → 60.00: 300.00 is exactly the cap.
	w.book(accounts.RoleResearcher, independent(at(2026, 3, 4, 9, 0), at(2026, 3, 4, 9, 30)))
}
