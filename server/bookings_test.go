package server

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"strings"
	"sync"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// berlin is the test facility's zone.
var berlin, _ = time.LoadLocation("Europe/Berlin")

// nextTuesday returns hh:mm on the first Tuesday at least a week after the world's
// clock, in the facility zone: inside the default opening hours and booking horizon.
func (w *world) nextTuesday(hh, mm int) time.Time {
	d := w.clock.Now().In(berlin).AddDate(0, 0, 7)
	for d.Weekday() != time.Tuesday {
		d = d.AddDate(0, 0, 1)
	}
	return time.Date(d.Year(), d.Month(), d.Day(), hh, mm, 0, 0, berlin)
}

// qualify grants a level on the world's instrument to a user.
func (w *world) qualify(userID string, level scheduling.QualificationLevel) {
	w.t.Helper()
	_, err := w.db.GrantQualification(context.Background(), scheduling.NewQualification{
		UserID: userID, InstrumentID: w.instr.ID, Level: level, Reason: "test grant", GrantedBy: w.users[accounts.RoleStaff].ID,
	}, w.clock.Now())
	if err != nil {
		w.t.Fatal(err)
	}
}

func (w *world) bookingBody(start, end time.Time, kind scheduling.BookingKind) map[string]any {
	return map[string]any{"instrument_id": w.instr.ID, "project_id": w.own.ID, "kind": string(kind),
		"start": start.Format(time.RFC3339), "end": end.Format(time.RFC3339)}
}

func TestBookingLifecycle(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	start := w.nextTuesday(9, 0)

	var b bookingAnswer
	r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(3*time.Hour), scheduling.KindIndependent), &b)
	if r.StatusCode != 201 || !b.Start.Equal(start) || !b.End.Equal(start.Add(3*time.Hour)) || !b.Mine || b.Status != scheduling.StatusActive {
		t.Fatalf("create: %d %s", r.StatusCode, r.Body)
	}
	// Overlap: 409 naming the conflicting range.
	r = w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(2*time.Hour), start.Add(4*time.Hour), scheduling.KindIndependent), nil)
	if r.StatusCode != 409 || !contains(r.Body, start.UTC().Format(time.RFC3339)) {
		t.Fatalf("overlap: %d %s", r.StatusCode, r.Body)
	}
	// Back-to-back [a,b) [b,c) is allowed.
	var next bookingAnswer
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(3*time.Hour), start.Add(4*time.Hour), scheduling.KindIndependent), &next); r.StatusCode != 201 {
		t.Fatalf("back-to-back: %d %s", r.StatusCode, r.Body)
	}
	// A rule violation is 422 naming the rule.
	r = w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(5*time.Hour+7*time.Minute), start.Add(6*time.Hour), scheduling.KindIndependent), nil)
	if r.StatusCode != 422 || !contains(r.Body, `"rule":"slot"`) {
		t.Fatalf("off-slot: %d %s", r.StatusCode, r.Body)
	}
	// Move the first booking later: it now overlaps the second → 409; shorten instead.
	move := map[string]string{"start": start.Format(time.RFC3339), "end": start.Add(90 * time.Minute).Format(time.RFC3339), "reason": "finished early"}
	var moved bookingAnswer
	if r := w.do(http.MethodPatch, "/api/v1/bookings/"+b.ID, researcher, move, &moved); r.StatusCode != 200 || !moved.End.Equal(start.Add(90*time.Minute)) {
		t.Fatalf("shorten: %d %s", r.StatusCode, r.Body)
	}
	move["end"] = start.Add(4 * time.Hour).Format(time.RFC3339)
	if r := w.do(http.MethodPatch, "/api/v1/bookings/"+b.ID, researcher, move, nil); r.StatusCode != 409 {
		t.Fatalf("extend into the next booking: %d %s", r.StatusCode, r.Body)
	}
	// Cancel with a reason; the record stays, with its history.
	if r := w.do(http.MethodPost, "/api/v1/bookings/"+b.ID+"/cancel", researcher, map[string]string{"reason": "specimen broke"}, nil); r.StatusCode != 200 {
		t.Fatalf("cancel: %d %s", r.StatusCode, r.Body)
	}
	var evs list[scheduling.BookingEvent]
	w.do(http.MethodGet, "/api/v1/bookings/"+b.ID+"/events", researcher, nil, &evs)
	if len(evs.Items) != 3 || evs.Items[0].Action != "created" || evs.Items[1].Action != "moved" || evs.Items[2].Action != "cancelled" ||
		evs.Items[2].Reason != "specimen broke" || evs.Items[2].Actor != w.users[accounts.RoleResearcher].ID {
		t.Fatalf("history: %+v", evs.Items)
	}
	// The freed range can be booked again.
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), nil); r.StatusCode != 201 {
		t.Fatalf("rebook freed range: %d %s", r.StatusCode, r.Body)
	}
}

func TestBookingRulesAndRights(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	start := w.nextTuesday(9, 0)
	// Not qualified.
	r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), nil)
	if r.StatusCode != 422 || !contains(r.Body, `"rule":"qualification"`) {
		t.Fatalf("unqualified: %d %s", r.StatusCode, r.Body)
	}
	// Supervised may book assisted time naming a staff member, not independent time.
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelSupervised)
	body := w.bookingBody(start, start.Add(time.Hour), scheduling.KindAssisted)
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, body, nil); r.StatusCode != 422 || !contains(r.Body, `"rule":"staff_required"`) {
		t.Fatalf("assisted without staff: %d %s", r.StatusCode, r.Body)
	}
	body["staff_id"] = w.users[accounts.RoleStaff].ID
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, body, nil); r.StatusCode != 201 {
		t.Fatalf("assisted: %d %s", r.StatusCode, r.Body)
	}
	// The staff member cannot assist elsewhere at the same time: a second instrument.
	in2, err := w.db.CreateInstrument(context.Background(), scheduling.Instrument{Code: "TEM-T", Name: "Test TEM", Kind: scheduling.KindTEM, Bookable: true, Corrector: scheduling.CorrectorNone}, "setup", time.Now())
	if err != nil {
		t.Fatal(err)
	}
	other := map[string]any{"instrument_id": in2.ID, "project_id": w.own.ID, "kind": "training", "user_id": w.users[accounts.RoleResearcher].ID,
		"staff_id": w.users[accounts.RoleStaff].ID, "start": start.Add(30 * time.Minute).Format(time.RFC3339), "end": start.Add(2 * time.Hour).Format(time.RFC3339)}
	if r := w.do(http.MethodPost, "/api/v1/bookings", w.tokens[accounts.RoleStaff], other, nil); r.StatusCode != 409 || !contains(r.Body, "staff member") {
		t.Fatalf("staff double-booked: %d %s", r.StatusCode, r.Body)
	}
	// Researchers cannot book in a foreign project, for someone else, or service time.
	foreign := w.bookingBody(start.Add(4*time.Hour), start.Add(5*time.Hour), scheduling.KindAssisted)
	foreign["project_id"], foreign["staff_id"] = w.foreign.ID, w.users[accounts.RoleStaff].ID
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, foreign, nil); r.StatusCode != 404 {
		t.Fatalf("foreign project: %d %s", r.StatusCode, r.Body)
	}
	svc := w.bookingBody(start.Add(6*time.Hour), start.Add(7*time.Hour), scheduling.KindService)
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, svc, nil); r.StatusCode != 422 {
		t.Fatalf("researcher service booking: %d %s", r.StatusCode, r.Body)
	}
}

func TestServiceBookingDisplaces(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	start := w.nextTuesday(10, 0)
	var a, b bookingAnswer
	w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), &a)
	w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(2*time.Hour), start.Add(3*time.Hour), scheduling.KindIndependent), &b)
	var svc bookingAnswer
	body := map[string]any{"instrument_id": w.instr.ID, "kind": "service", "start": start.Add(-2 * time.Hour).Format(time.RFC3339),
		"end": start.Add(150 * time.Minute).Format(time.RFC3339), "note": "gun bake-out"}
	if r := w.do(http.MethodPost, "/api/v1/bookings", w.tokens[accounts.RoleStaff], body, &svc); r.StatusCode != 201 {
		t.Fatalf("service: %d %s", r.StatusCode, r.Body)
	}
	if len(svc.Displaced) != 2 || svc.Displaced[0] != a.ID || svc.Displaced[1] != b.ID {
		t.Fatalf("displaced %v, want [%s %s]", svc.Displaced, a.ID, b.ID)
	}
	var got bookingAnswer
	w.do(http.MethodGet, "/api/v1/bookings/"+a.ID, researcher, nil, &got)
	if got.Status != scheduling.StatusCancelled || got.CancelReason == "" {
		t.Fatalf("displaced booking %+v", got.Booking)
	}
}

func TestLocalWallTimesResolvePerRFC5545(t *testing.T) {
	w := newWorld(t)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelUnattended)
	ctx := context.Background()
	if _, err := w.db.SetFacility(ctx, scheduling.Facility{Name: "NY", TimeZone: "America/New_York", Currency: "USD"}); err != nil {
		t.Fatal(err)
	}
	// Find the next spring-forward Sunday in New York after the clock, within the horizon.
	ny, _ := time.LoadLocation("America/New_York")
	day := w.clock.Now().In(ny)
	for ; ; day = day.AddDate(0, 0, 1) {
		d0 := time.Date(day.Year(), day.Month(), day.Day(), 0, 0, 0, 0, ny)
		if d0.AddDate(0, 0, 1).Sub(d0) == 23*time.Hour {
			day = d0
			break
		}
	}
	if day.Sub(w.clock.Now()) > 80*24*time.Hour {
		w.clock.Advance(day.Sub(w.clock.Now()) - 10*24*time.Hour)
		w.tokens[accounts.RoleResearcher] = w.login("researcher@test.example", testPassword).AccessToken
	}
	wall := fmt.Sprintf("%04d-%02d-%02dT02:30", day.Year(), day.Month(), day.Day())
	body := map[string]any{"instrument_id": w.instr.ID, "project_id": w.own.ID, "kind": "unattended",
		"start": wall, "end": fmt.Sprintf("%04d-%02d-%02dT06:30", day.Year(), day.Month(), day.Day())}
	var b bookingAnswer
	r := w.do(http.MethodPost, "/api/v1/bookings", w.tokens[accounts.RoleResearcher], body, &b)
	if r.StatusCode != 201 {
		t.Fatalf("create at %s: %d %s", wall, r.StatusCode, r.Body)
	}
	// [published: RFC 5545 §3.3.5] a time in the gap is read with the offset before it:
	// 02:30 EST (UTC−5) = 07:30Z, shown as 03:30 EDT.
	want := time.Date(day.Year(), day.Month(), day.Day(), 7, 30, 0, 0, time.UTC)
	if !b.Start.Equal(want) || b.Resolutions["start"] != scheduling.ResolutionGap || b.Start.In(ny).Hour() != 3 {
		t.Fatalf("start %s (%s) resolutions %v, want %s", b.Start, b.Start.In(ny), b.Resolutions, want)
	}
}

// TestConcurrentConflictingCreates: N goroutines × M creates on overlapping ranges of
// one instrument end with no overlapping rows, every 201 persisted and every 409 a real
// conflict.
func TestConcurrentConflictingCreates(t *testing.T) {
	w := newWorld(t)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	token := w.tokens[accounts.RoleResearcher]
	base := w.nextTuesday(8, 0)
	const workers, each = 8, 12
	type result struct {
		status int
		id     string
		start  time.Time
	}
	results := make(chan result, workers*each)
	var wg sync.WaitGroup
	for g := 0; g < workers; g++ {
		wg.Add(1)
		go func(g int) {
			defer wg.Done()
			for i := 0; i < each; i++ {
				// 30-minute slots on a 5-hour window, each booking 1 h long: plenty of overlap.
				start := base.Add(time.Duration((g*7+i*3)%10) * 30 * time.Minute)
				var b bookingAnswer
				r := w.do(http.MethodPost, "/api/v1/bookings", token, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), &b)
				results <- result{r.StatusCode, b.ID, start}
			}
		}(g)
	}
	wg.Wait()
	close(results)
	created := map[string]bool{}
	conflicts := 0
	for r := range results {
		switch r.status {
		case 201:
			created[r.id] = true
		case 409:
			conflicts++
		default:
			t.Fatalf("unexpected status %d", r.status)
		}
	}
	rows, err := w.db.Bookings(context.Background(), scheduling.BookingFilter{InstrumentID: w.instr.ID})
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != len(created) {
		t.Fatalf("%d rows stored, %d creates answered 201", len(rows), len(created))
	}
	for i, a := range rows {
		if !created[a.ID] {
			t.Fatalf("row %s was never answered 201", a.ID)
		}
		for _, b := range rows[i+1:] {
			if scheduling.Overlaps(a.Start, a.End, b.Start, b.End) {
				t.Fatalf("overlapping rows %v–%v and %v–%v", a.Start, a.End, b.Start, b.End)
			}
		}
	}
	// Every 409 was a real conflict: each refused range overlaps a stored booking, which
	// follows when the stored rows leave no free hour-long slot on the 30-minute grid.
	if conflicts == 0 || len(created) < 4 {
		t.Fatalf("created %d, conflicts %d: the test did not contend", len(created), conflicts)
	}
	for slot := 0; slot < 10; slot++ {
		s := base.Add(time.Duration(slot) * 30 * time.Minute)
		free := true
		for _, b := range rows {
			if scheduling.Overlaps(s, s.Add(time.Hour), b.Start, b.End) {
				free = false
			}
		}
		if free {
			t.Fatalf("slot %s was refused yet is free", s)
		}
	}
}

func contains(b []byte, s string) bool { return len(s) > 0 && strings.Contains(string(b), s) }

// TestBookingAcrossAutumnChangeIsAnHourLonger: 18:00 Saturday to 08:00 Sunday across
// the autumn change is 14 h of wall time and 15 h of elapsed time.
func TestBookingAcrossAutumnChangeIsAnHourLonger(t *testing.T) {
	w := newWorld(t)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelUnattended)
	// The next Sunday whose day is 25 h long in Berlin (the last Sunday of October).
	day := w.clock.Now().In(berlin)
	for {
		d0 := time.Date(day.Year(), day.Month(), day.Day(), 0, 0, 0, 0, berlin)
		if d0.AddDate(0, 0, 1).Sub(d0) == 25*time.Hour {
			day = d0
			break
		}
		day = day.AddDate(0, 0, 1)
	}
	sat := day.AddDate(0, 0, -1)
	body := map[string]any{"instrument_id": w.instr.ID, "project_id": w.own.ID, "kind": "unattended", "user_id": w.users[accounts.RoleResearcher].ID,
		"start": fmt.Sprintf("%04d-%02d-%02dT18:00", sat.Year(), sat.Month(), sat.Day()),
		"end":   fmt.Sprintf("%04d-%02d-%02dT08:00", day.Year(), day.Month(), day.Day())}
	var b bookingAnswer
	// Staff book it: the date may lie past the researchers' booking horizon.
	if r := w.do(http.MethodPost, "/api/v1/bookings", w.tokens[accounts.RoleStaff], body, &b); r.StatusCode != 201 {
		t.Fatalf("overnight booking: %d %s", r.StatusCode, r.Body)
	}
	// [computed] CEST (UTC+2) to CET (UTC+1): 16:00Z to 07:00Z is 15 h elapsed.
	if got := b.End.Sub(b.Start); got != 15*time.Hour {
		t.Fatalf("elapsed %s, want 15h (wall clock shows 14 h)", got)
	}
}

// TestBookingOverlapFoundBeforeInsert: an overlap seen when the booking's context is
// read is answered as the insert would answer it (409 naming the range, after the
// rules), cancelled bookings do not count, and no refused attempt leaves a row or a
// history event behind.
func TestBookingOverlapFoundBeforeInsert(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	start := w.nextTuesday(9, 0)
	var a bookingAnswer
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(3*time.Hour), scheduling.KindIndependent), &a); r.StatusCode != 201 {
		t.Fatalf("create: %d %s", r.StatusCode, r.Body)
	}
	// A broken rule wins over the overlap, as before: 422 naming the rule.
	r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(time.Hour+7*time.Minute), start.Add(4*time.Hour), scheduling.KindIndependent), nil)
	if r.StatusCode != 422 || !contains(r.Body, `"rule":"slot"`) {
		t.Fatalf("off-slot overlap: %d %s", r.StatusCode, r.Body)
	}
	// A well-formed overlap: 409 with the taken range in the message and in fields.start.
	taken := "[" + start.UTC().Format(time.RFC3339) + ", " + start.Add(3*time.Hour).UTC().Format(time.RFC3339) + ")"
	r = w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(time.Hour), start.Add(5*time.Hour), scheduling.KindIndependent), nil)
	var e errorBody
	_ = json.Unmarshal(r.Body, &e)
	wantMsg := "the instrument is booked from " + start.UTC().Format(time.RFC3339) + " to " + start.Add(3*time.Hour).UTC().Format(time.RFC3339)
	if r.StatusCode != 409 || e.Error.Code != "conflict" || e.Error.Message != wantMsg || e.Error.Fields["start"] != "overlaps "+taken {
		t.Fatalf("overlap: %d %s", r.StatusCode, r.Body)
	}
	bs, err := w.db.Bookings(context.Background(), scheduling.BookingFilter{InstrumentID: w.instr.ID, IncludeCancelled: true})
	if err != nil || len(bs) != 1 {
		t.Fatalf("bookings after refusals: %d, %v", len(bs), err)
	}
	// Once the first booking is cancelled its range is free.
	if r := w.do(http.MethodPost, "/api/v1/bookings/"+a.ID+"/cancel", researcher, map[string]string{"reason": "plans changed"}, nil); r.StatusCode != 200 {
		t.Fatalf("cancel: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(time.Hour), start.Add(5*time.Hour), scheduling.KindIndependent), nil); r.StatusCode != 201 {
		t.Fatalf("over a cancelled booking: %d %s", r.StatusCode, r.Body)
	}
}

// TestBookingFollowsRuleChangesAtOnce books through the API, changes what the rules
// are judged from through the API (a revoked qualification, an instrument closed for
// booking, a researcher taken off the project), and books again at once: each next
// booking is judged on the change, though the server keeps the rules context of the
// bookings before it, and each undoing lets bookings through again.
func TestBookingFollowsRuleChangesAtOnce(t *testing.T) {
	w := newWorld(t)
	researcher, staff, manager := w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleManager]
	me := w.users[accounts.RoleResearcher].ID
	start := w.nextTuesday(8, 0)
	book := func(want int, rule string) {
		t.Helper()
		body := w.bookingBody(start, start.Add(30*time.Minute), scheduling.KindIndependent)
		start = start.Add(45 * time.Minute)
		r := w.do(http.MethodPost, "/api/v1/bookings", researcher, body, nil)
		if r.StatusCode != want || (rule != "" && !contains(r.Body, `"rule":"`+rule+`"`)) {
			t.Fatalf("booking: %d %s, want %d %s", r.StatusCode, r.Body, want, rule)
		}
	}
	grant := func() string {
		t.Helper()
		var q scheduling.Qualification
		if r := w.do(http.MethodPost, "/api/v1/instruments/"+w.instr.ID+"/qualifications", staff,
			map[string]any{"user_id": me, "level": "independent", "reason": "trained"}, &q); r.StatusCode != 201 {
			t.Fatalf("grant: %d %s", r.StatusCode, r.Body)
		}
		return q.ID
	}
	q := grant()
	book(201, "")
	book(201, "")
	if r := w.do(http.MethodPost, "/api/v1/qualifications/"+q+"/revoke", staff, map[string]string{"reason": "lapsed"}, nil); r.StatusCode != 200 {
		t.Fatalf("revoke: %d %s", r.StatusCode, r.Body)
	}
	book(422, "qualification")
	grant()
	book(201, "")

	setBookable := func(open bool) {
		t.Helper()
		if r := w.do(http.MethodPut, "/api/v1/instruments/"+w.instr.ID+"/bookable", manager, map[string]bool{"bookable": open}, nil); r.StatusCode != 200 {
			t.Fatalf("bookable %v: %d %s", open, r.StatusCode, r.Body)
		}
	}
	setBookable(false)
	book(422, "bookable")
	setBookable(true)
	book(201, "")

	// Another group's project, which the researcher joins and then leaves.
	shared := w.createProject("SHARED-1", w.other.ID)
	member := "/api/v1/projects/" + shared.ID + "/members/" + me
	if r := w.do(http.MethodPut, member, manager, nil, nil); r.StatusCode != 200 {
		t.Fatalf("join: %d %s", r.StatusCode, r.Body)
	}
	bookShared := func() response {
		body := w.bookingBody(start, start.Add(30*time.Minute), scheduling.KindIndependent)
		body["project_id"] = shared.ID
		start = start.Add(45 * time.Minute)
		return w.do(http.MethodPost, "/api/v1/bookings", researcher, body, nil)
	}
	for range 2 {
		if r := bookShared(); r.StatusCode != 201 {
			t.Fatalf("booking for the joined project: %d %s", r.StatusCode, r.Body)
		}
	}
	if r := w.do(http.MethodDelete, member, manager, nil, nil); r.StatusCode != 200 {
		t.Fatalf("leave: %d %s", r.StatusCode, r.Body)
	}
	if r := bookShared(); r.StatusCode != 404 {
		t.Fatalf("booking for the project left: %d %s, want 404", r.StatusCode, r.Body)
	}
}
