package server

import (
	"bytes"
	"crypto/sha256"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"net/http"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/gowebpki/jcs"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// at is a wall time in the test facility's zone (Europe/Berlin).
func at(y int, m time.Month, d, hh, mm int) time.Time {
	return time.Date(y, m, d, hh, mm, 0, 0, berlin)
}

// moveClock sets the world's clock and signs every role in again (access tokens last
// 15 minutes of the world's time).
func (w *world) moveClock(to time.Time) {
	w.t.Helper()
	w.clock.Advance(to.Sub(w.clock.Now()))
	for _, r := range accounts.Roles {
		w.tokens[r] = w.login(w.users[r].Email, testPassword).AccessToken
	}
}

// refRateBody is REFERENCE §3's [constructed] rates: 120/h internal, 60/h unattended,
// 65/h staff, in cents.
func refRateBody(from time.Time) map[string]any {
	return map[string]any{"effective_from": from, "classes": []map[string]any{{"rate_class": "internal",
		"independent_hourly_minor": 12000, "assisted_hourly_minor": 12000, "training_hourly_minor": 12000,
		"unattended_hourly_minor": 6000, "staff_hourly_minor": 6500}}}
}

// billingSetup gives the world REFERENCE §3's rates from 1 March 2026, the default
// policy with a 400.00 cap per unattended booking, and three funding accounts on the
// researcher's project split 50/30/20 by default. It returns the accounts' ids.
func (w *world) billingSetup() []string {
	w.t.Helper()
	manager := w.tokens[accounts.RoleManager]
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments/"+w.instr.ID+"/rate-schedules", manager, refRateBody(at(2026, 3, 1, 0, 0)), nil)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/facility/billing-policy", manager, map[string]any{"unattended_cap_minor": 40000}, nil)
	var ids []string
	for _, code := range []string{"GRANT-7", "CENTRE-2", "DEPT-1"} {
		var a scheduling.FundingAccount
		w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/funding-accounts", manager,
			map[string]any{"code": code, "valid_from": at(2026, 1, 1, 0, 0), "valid_until": at(2027, 1, 1, 0, 0)}, &a)
		ids = append(ids, a.ID)
	}
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/projects/"+w.own.ID+"/funding", manager, map[string]any{"funding": []map[string]any{
		{"account_id": ids[0], "basis_points": 5000}, {"account_id": ids[1], "basis_points": 3000}, {"account_id": ids[2], "basis_points": 2000}}}, nil)
	return ids
}

// book makes a booking through the API as the given role and returns its id.
func (w *world) book(role accounts.Role, body map[string]any) string {
	w.t.Helper()
	var b bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", w.tokens[role], body, &b)
	return b.ID
}

// use checks a booking in and out at the instants given, as the researcher.
func (w *world) use(bookingID string, from, to time.Time) {
	w.t.Helper()
	tok := w.tokens[accounts.RoleResearcher]
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+bookingID+"/check-in", tok, map[string]string{"at": from.Format(time.RFC3339)}, nil)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+bookingID+"/check-out", tok, map[string]string{"at": to.Format(time.RFC3339)}, nil)
}

// referenceMonth books and uses REFERENCE §3's [constructed] month through the API in
// March 2026, and returns the booking ids in the order REFERENCE lists them.
func (w *world) referenceMonth() []string {
	w.t.Helper()
	researcher := w.users[accounts.RoleResearcher]
	w.qualify(researcher.ID, scheduling.LevelUnattended)
	w.qualify(w.other.ID, scheduling.LevelIndependent)
	body := func(start, end time.Time, kind scheduling.BookingKind) map[string]any {
		b := w.bookingBody(start, end, kind)
		if kind == scheduling.KindAssisted {
			b["staff_id"] = w.users[accounts.RoleStaff].ID
		}
		return b
	}
	ids := []string{
		w.book(accounts.RoleResearcher, body(at(2026, 3, 2, 9, 0), at(2026, 3, 2, 12, 0), scheduling.KindIndependent)),
		w.book(accounts.RoleResearcher, body(at(2026, 3, 3, 13, 0), at(2026, 3, 3, 13, 30), scheduling.KindIndependent)),
		w.book(accounts.RoleResearcher, body(at(2026, 3, 4, 10, 0), at(2026, 3, 4, 14, 0), scheduling.KindIndependent)),
		w.book(accounts.RoleResearcher, body(at(2026, 3, 5, 18, 0), at(2026, 3, 6, 8, 0), scheduling.KindUnattended)),
		w.book(accounts.RoleResearcher, body(at(2026, 3, 9, 14, 0), at(2026, 3, 9, 16, 0), scheduling.KindAssisted)),
	}
	w.moveClock(at(2026, 3, 2, 12, 0))
	w.use(ids[0], at(2026, 3, 2, 9, 10), at(2026, 3, 2, 11, 55))
	w.moveClock(at(2026, 3, 3, 14, 0))
	// REFERENCE gives only the end of the usage; it starts on time.
	w.use(ids[1], at(2026, 3, 3, 13, 0), at(2026, 3, 3, 13, 40))
	// 10 h ahead the 4 h booking is cancelled; someone else books 1.5 h of it.
	w.moveClock(at(2026, 3, 4, 0, 0))
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+ids[2]+"/cancel", w.tokens[accounts.RoleResearcher], map[string]string{"reason": "specimen not ready"}, nil)
	other := w.bookingBody(at(2026, 3, 4, 10, 0), at(2026, 3, 4, 11, 30), scheduling.KindIndependent)
	other["project_id"], other["user_id"] = w.foreign.ID, w.other.ID
	w.book(accounts.RoleManager, other)
	w.moveClock(at(2026, 3, 6, 8, 0))
	w.use(ids[3], at(2026, 3, 5, 18, 0), at(2026, 3, 6, 8, 0))
	w.moveClock(at(2026, 3, 9, 16, 0))
	w.use(ids[4], at(2026, 3, 9, 14, 0), at(2026, 3, 9, 16, 0))
	return ids
}

// TestStatementReferenceMonthThroughAPI runs REFERENCE §3's [constructed] month from
// bookings and usage to the issued statement, its CSV and its page.
func TestStatementReferenceMonthThroughAPI(t *testing.T) {
	w := newWorld(t)
	w.moveClock(at(2026, 2, 16, 9, 0))
	accts := w.billingSetup()
	ids := w.referenceMonth()
	w.moveClock(at(2026, 4, 1, 10, 0))
	manager := w.tokens[accounts.RoleManager]

	var rec scheduling.StatementRecord
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-03"}, &rec)
	type line struct {
		booking   string
		component scheduling.ChargeComponent
		rule      scheduling.ChargeRule
		minutes   int
		amount    int64
	}
	var got []line
	for _, l := range rec.Lines {
		got = append(got, line{l.BookingID, l.Component, l.Rule, l.Minutes, l.AmountMinor})
	}
	want := []line{
		// [constructed] REFERENCE §3: booked 09:00–12:00, used 09:10–11:55 → 3 h → 360.00.
		{ids[0], scheduling.ComponentInstrumentTime, scheduling.ChargeRuleGreater, 180, 36000},
		// [constructed] REFERENCE §3: booked 13:00–13:30, used to 13:40 → 45 min → 1 h minimum → 120.00.
		{ids[1], scheduling.ComponentInstrumentTime, scheduling.ChargeRuleMinimum, 60, 12000},
		// [constructed] REFERENCE §3: 4 h cancelled 10 h ahead, 1.5 h rebooked → 2.5 h → 300.00.
		{ids[2], scheduling.ComponentLateCancellation, scheduling.ChargeRuleLateCancellation, 150, 30000},
		// [constructed] REFERENCE §3: unattended 18:00–08:00 → 14 h × 60 = 840 → capped 400.00.
		{ids[3], scheduling.ComponentInstrumentTime, scheduling.ChargeRuleUnattendedCap, 840, 40000},
		// [constructed] REFERENCE §3: assisted 2 h → 240 + 130 = 370.00.
		{ids[4], scheduling.ComponentInstrumentTime, scheduling.ChargeRuleGreater, 120, 24000},
		{ids[4], scheduling.ComponentStaffTime, scheduling.ChargeRuleGreater, 120, 13000},
	}
	if !slices.Equal(got, want) {
		t.Fatalf("lines\n got %+v\nwant %+v", got, want)
	}
	if rec.TotalMinor != 155000 { // [constructed] REFERENCE §3: month total 1 550.00.
		t.Errorf("total %d, want 155000", rec.TotalMinor)
	}
	// [constructed] REFERENCE §3: split 50/30/20 → 775.00 / 465.00 / 310.00.
	wantAccounts := []scheduling.Allocation{{AccountID: accts[0], AmountMinor: 77500}, {AccountID: accts[1], AmountMinor: 46500}, {AccountID: accts[2], AmountMinor: 31000}}
	if !slices.Equal(rec.AccountTotals, wantAccounts) || rec.Status != scheduling.StatementDraft {
		t.Errorf("account totals %v (%s), want %v in a draft", rec.AccountTotals, rec.Status, wantAccounts)
	}

	// Recomputing the draft gives the same statement; issuing makes it final.
	var again scheduling.StatementRecord
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-03"}, &again)
	if again.ID != rec.ID || again.TotalMinor != rec.TotalMinor {
		t.Errorf("recomputed draft %s %d, want %s %d", again.ID, again.TotalMinor, rec.ID, rec.TotalMinor)
	}
	var issued scheduling.StatementRecord
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/statements/"+rec.ID+"/issue", manager, nil, &issued)
	if issued.Status != scheduling.StatementIssued || issued.IssuedAt == nil || issued.TotalMinor != 155000 {
		t.Fatalf("issued %+v", issued)
	}
	checkIssuedIsFinal(t, w, rec.ID)
	checkStatementCSV(t, w, rec.ID, 155000, len(want)*3)

	// The researcher reads their own project's statement, page included; another's is hidden.
	r := w.expect(http.StatusOK, http.MethodGet, "/api/v1/statements/"+rec.ID+"?format=html", w.tokens[accounts.RoleResearcher], nil, nil)
	if !bytes.Contains(r.Body, []byte("1550.00")) && !bytes.Contains(r.Body, []byte("1,550.00")) && !bytes.Contains(r.Body, []byte("1 550.00")) {
		t.Errorf("statement page shows no total of 1550.00: %.300s", r.Body)
	}
	// The page names the SHA-256 of the state the issue event holds: the issued
	// record's canonical JSON, computed here by encoding/json and github.com/gowebpki/jcs.
	raw, err := json.Marshal(issued)
	if err != nil {
		t.Fatal(err)
	}
	canon, err := jcs.Transform(raw)
	if err != nil {
		t.Fatal(err)
	}
	if sum := sha256.Sum256(canon); !bytes.Contains(r.Body, []byte(hex.EncodeToString(sum[:]))) {
		t.Errorf("statement page does not show the state digest %x", sum)
	}
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/statements/"+rec.ID, w.login(w.other.Email, testPassword).AccessToken, nil, nil)

	checkReferenceUtilization(t, w)
	checkReferenceRatesAndRecovery(t, w)
}

// checkReferenceUtilization reports March 2026 on the instrument that held REFERENCE
// §3's month, plus the 1.5 h another project rebooked.
func checkReferenceUtilization(t *testing.T, w *world) {
	t.Helper()
	path := "/api/v1/reports/utilization?instrument_id=" + w.instr.ID + "&from=2026-03-01&to=2026-04-01"
	var rep scheduling.UtilizationReport
	w.expect(http.StatusOK, http.MethodGet, path, w.tokens[accounts.RoleStaff], nil, &rep)
	// [computed] 22 weekdays in March 2026 × 10 h of default opening hours = 13 200 min.
	// [constructed] REFERENCE §3 month: booked 180 + 30 + 840 + 120 (and 90 rebooked by
	// another project) = 1 260 min; used 165 + 40 + 840 + 120 = 1 165 min; the 4 h
	// booking cancelled 10 h ahead is 240 min cancelled late.
	want := scheduling.UtilizationFigures{BookedMinutes: 1260, UsedMinutes: 1165, CancelledLateMinutes: 240}
	if rep.OpeningMinutes != 13200 || rep.AvailableMinutes != 13200 || rep.UptimePermille != 1000 || rep.UtilizationFigures != want {
		t.Errorf("utilization %+v", rep)
	}
	for _, p := range rep.ByProject {
		if p.ProjectID == w.own.ID && (p.BookedMinutes != 1170 || p.CancelledLateMinutes != 240) {
			t.Errorf("own project's utilization %+v", p)
		}
	}
	r := w.expect(http.StatusOK, http.MethodGet, path+"&format=csv", w.tokens[accounts.RoleAuditor], nil, nil)
	recs, err := csv.NewReader(bytes.NewReader(r.Body)).ReadAll()
	// One row for the instrument, three kinds (independent, assisted, unattended), two projects.
	if err != nil || len(recs) != 7 || !slices.Equal(recs[0], scheduling.UtilizationCSVColumns()) {
		t.Errorf("utilization CSV: %v %q", err, recs)
	}
	// The facility's report holds the same report for the instrument, and the CSV its rows.
	var all facilityUtilizationAnswer
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/facility-utilization?from=2026-03-01&to=2026-04-01", w.tokens[accounts.RoleManager], nil, &all)
	i := slices.IndexFunc(all.Instruments, func(r scheduling.UtilizationReport) bool { return r.InstrumentID == w.instr.ID })
	if i < 0 || !reflect.DeepEqual(all.Instruments[i], rep) || !slices.IsSortedFunc(all.Instruments, func(a, b scheduling.UtilizationReport) int {
		return strings.Compare(a.InstrumentID, b.InstrumentID)
	}) {
		t.Errorf("facility report %+v\nwant among them %+v", all.Instruments, rep)
	}
	r = w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/facility-utilization?from=2026-03-01&to=2026-04-01&format=csv", w.tokens[accounts.RoleAuditor], nil, nil)
	facility, err := csv.NewReader(bytes.NewReader(r.Body)).ReadAll()
	if err != nil || !slices.Equal(facility[0], scheduling.UtilizationCSVColumns()) {
		t.Fatalf("facility CSV: %v %q", err, facility)
	}
	var mine [][]string
	for _, row := range facility[1:] {
		if row[0] == w.instr.ID {
			mine = append(mine, row)
		}
	}
	if !reflect.DeepEqual(mine, recs[1:]) {
		t.Errorf("the instrument's rows in the facility CSV %q, want %q", mine, recs[1:])
	}
}

// checkReferenceRatesAndRecovery runs REFERENCE §3's rate-setting example through the
// calculator, saves it as a schedule, and sets the year's cost pool against the
// issued March statement.
func checkReferenceRatesAndRecovery(t *testing.T, w *world) {
	t.Helper()
	manager := w.tokens[accounts.RoleManager]
	body := refRateInputs()
	body["save"] = map[string]any{"instrument_id": w.instr.ID, "effective_from": w.clock.Now().Add(time.Hour), "staff_hourly_minor": 6500}
	var out rateCalculationAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/rate-calculations", manager, body, &out)
	c := out.Calculation
	// [constructed] REFERENCE §3: pool 224 000 over 1 600 h → 140.00; with the subsidy
	// 120.00; external academic at 55 % F&A 217.00; commercial 1.5 × that 325.50.
	if c.CostPoolMinor != 22400000 || c.FullCostHourlyMinor != 14000 || c.InternalHourlyMinor != 12000 ||
		c.ExternalAcademicHourlyMinor != 21700 || c.CommercialHourlyMinor != 32550 {
		t.Errorf("calculation %+v", c)
	}
	// [computed] staff 65.00 marked up as the instrument rate: × 1.55 = 100.75, × 1.5 = 151.125 → 151.13.
	if s := out.Schedule; s == nil || len(s.Classes) != 3 || s.Classes[0].IndependentHourlyMinor != 12000 ||
		s.Classes[1].StaffHourlyMinor != 10075 || s.Classes[2].IndependentHourlyMinor != 32550 || s.Classes[2].StaffHourlyMinor != 15113 {
		t.Errorf("saved schedule %+v", out.Schedule)
	}
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/cost-entries", manager,
		map[string]any{"instrument_id": w.instr.ID, "fiscal_year": 2026, "category": "cost_pool", "amount_minor": 22400000}, nil)
	var rep recoveryAnswer
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/recovery?fiscal_year=2026", w.tokens[accounts.RoleAuditor], nil, &rep)
	// [constructed] 224 000.00 of costs against the 1 550.00 issued for March.
	if len(rep.Lines) != 1 || rep.Lines[0].CostsMinor != 22400000 || rep.Lines[0].ChargedMinor != 155000 || rep.Lines[0].BalanceMinor != 22245000 {
		t.Errorf("recovery %+v", rep.Lines)
	}
}

// checkIssuedIsFinal: an issued statement is not recomputed or issued again (the
// database's own refusal is tested in storage/postgres), and a correction is an adjustment on the next month's statement.
func checkIssuedIsFinal(t *testing.T, w *world, id string) {
	t.Helper()
	manager := w.tokens[accounts.RoleManager]
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-03"}, nil)
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/statements/"+id+"/issue", manager, nil, nil)
	var adj scheduling.Adjustment
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/adjustments", manager,
		map[string]any{"amount_minor": -2000, "reason": "detector fault on 9 March", "corrects_statement_id": id}, &adj)
	var april scheduling.StatementRecord
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-04"}, &april)
	if april.TotalMinor != -2000 || len(april.Lines) != 1 || april.Lines[0].CorrectsStatementID != id {
		t.Errorf("April statement %+v, want the -20.00 correction of %s", april, id)
	}
	var march scheduling.StatementRecord
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/statements/"+id, manager, nil, &march)
	if march.TotalMinor != 155000 || len(march.Lines) != 6 {
		t.Errorf("issued statement changed: total %d, %d lines", march.TotalMinor, len(march.Lines))
	}
}

// checkStatementCSV reads the CSV export: the documented columns in order, one row per
// line and account, amount_minor summing to the total.
func checkStatementCSV(t *testing.T, w *world, id string, total int64, rows int) {
	t.Helper()
	r := w.expect(http.StatusOK, http.MethodGet, "/api/v1/statements/"+id+"?format=csv", w.tokens[accounts.RoleAuditor], nil, nil)
	if ct := r.Header.Get("Content-Type"); !strings.HasPrefix(ct, "text/csv") {
		t.Errorf("Content-Type %q", ct)
	}
	recs, err := csv.NewReader(bytes.NewReader(r.Body)).ReadAll()
	if err != nil || len(recs) != rows+1 {
		t.Fatalf("CSV: %v, %d rows, want %d", err, len(recs)-1, rows)
	}
	if !slices.Equal(recs[0], scheduling.StatementCSVColumns()) {
		t.Errorf("CSV header %v", recs[0])
	}
	col := slices.Index(recs[0], "amount_minor")
	var sum int64
	for _, rec := range recs[1:] {
		v, _ := strconv.ParseInt(rec[col], 10, 64)
		sum += v
	}
	if sum != total {
		t.Errorf("CSV amount_minor sums to %d, want %d", sum, total)
	}
}

// TestBookingRefusedOnExpiredFunding: a booking whose charges would go to an account
// expired (or not yet valid) at its time is refused when made, naming the rule and
// the field.
func TestBookingRefusedOnExpiredFunding(t *testing.T) {
	w := newWorld(t)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	start := w.nextTuesday(9, 0)
	var a scheduling.FundingAccount
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/funding-accounts", manager,
		map[string]any{"code": "ENDING-1", "valid_until": start.Add(time.Hour)}, &a)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/projects/"+w.own.ID+"/funding", manager,
		map[string]any{"funding": []map[string]any{{"account_id": a.ID, "basis_points": 10000}}}, nil)
	r := w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/bookings", researcher,
		w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent), nil)
	if !contains(r.Body, `"rule":"funding_account"`) || !fieldNamed(r, "funding") {
		t.Errorf("expired account: %s", r.Body)
	}
	// Inside the account's validity the same project books.
	var made bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), &made)
	// Not yet valid: moved to start after the booking.
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/funding-accounts/"+a.ID, manager,
		map[string]any{"valid_from": start.Add(24 * time.Hour), "valid_until": start.Add(48 * time.Hour)}, nil)
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/bookings", researcher,
		w.bookingBody(start.Add(2*time.Hour), start.Add(3*time.Hour), scheduling.KindIndependent), nil)
	if !contains(r.Body, "may not be charged before") {
		t.Errorf("not yet valid account: %s", r.Body)
	}
	// A move is checked the same way: into the account's validity, then out of it.
	move := func(from time.Time) map[string]string {
		return map[string]string{"start": from.Format(time.RFC3339), "end": from.Add(time.Hour).Format(time.RFC3339), "reason": "specimen late"}
	}
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/bookings/"+made.ID, researcher, move(start.Add(25*time.Hour)), nil)
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPatch, "/api/v1/bookings/"+made.ID, researcher, move(start.Add(49*time.Hour)), nil)
	if !contains(r.Body, `"rule":"funding_account"`) {
		t.Errorf("move past the account's validity: %s", r.Body)
	}
}
