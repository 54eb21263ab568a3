package server

import (
	"context"
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

func TestUsageCheckInOutOverrunAndNoShow(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	start := w.nextTuesday(9, 0)
	var a, b bookingAnswer
	w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent), &a)
	w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(3*time.Hour), start.Add(4*time.Hour), scheduling.KindIndependent), &b)
	if a.ID == "" || b.ID == "" {
		t.Fatal("bookings not created")
	}
	// The instrument's agent checks in 10 minutes early; the user checks out 15 minutes late.
	w.clock.Advance(start.Add(-10 * time.Minute).Sub(w.clock.Now()))
	researcher = w.login("researcher@test.example", testPassword).AccessToken
	var u scheduling.Usage
	if r := w.do(http.MethodPost, "/api/v1/bookings/"+a.ID+"/check-in", w.agent, nil, &u); r.StatusCode != 200 || u.Source != scheduling.SourceAgent {
		t.Fatalf("agent check-in: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodPost, "/api/v1/bookings/"+a.ID+"/check-in", researcher, nil, nil); r.StatusCode != 409 {
		t.Fatalf("second check-in: %d", r.StatusCode)
	}
	w.clock.Advance(2*time.Hour + 25*time.Minute)
	researcher = w.login("researcher@test.example", testPassword).AccessToken // access tokens last 15 min
	if r := w.do(http.MethodPost, "/api/v1/bookings/"+a.ID+"/check-out", researcher, nil, &u); r.StatusCode != 200 || u.EndedAt == nil {
		t.Fatalf("check-out: %d %s", r.StatusCode, r.Body)
	}
	var rep scheduling.UsageReport
	w.do(http.MethodGet, "/api/v1/bookings/"+a.ID+"/usage", researcher, nil, &rep)
	// [constructed] used 08:50–11:15 against a 09:00–11:00 booking: 145 min used, 25 min overrun.
	if rep.UsedMinutes != 145 || rep.OverrunMinutes != 25 || rep.NoShowAt != nil {
		t.Fatalf("usage report %+v", rep)
	}
	// Booking b (12:00–13:00) gets no usage: after its start plus the 30-minute grace it
	// is a no-show, marked once.
	w.clock.Advance(start.Add(3*time.Hour + 31*time.Minute).Sub(w.clock.Now()))
	researcher = w.login("researcher@test.example", testPassword).AccessToken
	auditor := w.login("auditor@test.example", testPassword).AccessToken
	ids, err := w.db.MarkNoShows(context.Background(), w.clock.Now())
	if err != nil || len(ids) != 1 || ids[0] != b.ID {
		t.Fatalf("no-shows %v %v, want [%s]", ids, err, b.ID)
	}
	if again, _ := w.db.MarkNoShows(context.Background(), w.clock.Now()); len(again) != 0 {
		t.Fatalf("no-show marked twice: %v", again)
	}
	w.do(http.MethodGet, "/api/v1/bookings/"+b.ID+"/usage", researcher, nil, &rep)
	if rep.NoShowAt == nil {
		t.Fatalf("usage report of a no-show %+v", rep)
	}
	// Another researcher's booking is not theirs to check in; the auditor may not write.
	if r := w.do(http.MethodPost, "/api/v1/bookings/"+a.ID+"/check-in", auditor, nil, nil); r.StatusCode != 403 {
		t.Fatalf("auditor check-in: %d", r.StatusCode)
	}
}

func TestFeedTokensAndICalendar(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	start := w.nextTuesday(9, 0)
	var a bookingAnswer
	w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent), &a)
	var created feedTokenCreated
	if r := w.do(http.MethodPost, "/api/v1/me/feed-tokens", researcher, nil, &created); r.StatusCode != 201 || created.Token == "" {
		t.Fatalf("feed token: %d %s", r.StatusCode, r.Body)
	}
	r := w.do(http.MethodGet, created.MyBookings, "", nil, nil)
	if r.StatusCode != 200 || r.Header.Get("Content-Type") != "text/calendar; charset=utf-8" {
		t.Fatalf("my feed: %d %q", r.StatusCode, r.Header.Get("Content-Type"))
	}
	// [published: RFC 5545 §3.8.4.7] one stable UID per booking; §3.3.5 UTC DTSTART.
	for _, want := range []string{"UID:" + a.ID + "@beamledger", "DTSTART:" + start.UTC().Format("20060102T150405Z"), "\r\n"} {
		if !contains(r.Body, want) {
			t.Fatalf("feed lacks %q:\n%s", want, r.Body)
		}
	}
	// Someone else's view of the instrument feed shows the booking without its details.
	var other feedTokenCreated
	w.do(http.MethodPost, "/api/v1/me/feed-tokens", w.login("other@test.example", testPassword).AccessToken, nil, &other)
	r = w.do(http.MethodGet, "/feeds/"+other.Token+"/instruments/"+w.instr.ID+".ics", "", nil, nil)
	if r.StatusCode != 200 || !contains(r.Body, "SUMMARY:Booked (independent)") || contains(r.Body, "booking "+a.ID) {
		t.Fatalf("foreign instrument feed: %d\n%s", r.StatusCode, r.Body)
	}
	// Revoked tokens and made-up tokens get 404.
	if r := w.do(http.MethodDelete, "/api/v1/me/feed-tokens/"+created.ID, researcher, nil, nil); r.StatusCode != 200 {
		t.Fatalf("revoke: %d", r.StatusCode)
	}
	for _, path := range []string{created.MyBookings, "/feeds/blfeed_made-up/mine.ics", "/feeds/notatoken/mine.ics"} {
		if r := w.do(http.MethodGet, path, "", nil, nil); r.StatusCode != 404 {
			t.Fatalf("%s: %d", path, r.StatusCode)
		}
	}
}
