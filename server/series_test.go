package server

import (
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

func TestSeriesAllOrNothingBookFreeAndCancelRest(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	first := w.nextTuesday(9, 0)
	// Someone already holds the third Tuesday 10:00–11:00.
	third := first.AddDate(0, 0, 14)
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(third.Add(time.Hour), third.Add(2*time.Hour), scheduling.KindIndependent), nil); r.StatusCode != 201 {
		t.Fatalf("blocking booking: %d %s", r.StatusCode, r.Body)
	}
	body := map[string]any{"instrument_id": w.instr.ID, "project_id": w.own.ID, "kind": "independent",
		"rrule": "FREQ=WEEKLY;COUNT=4;BYDAY=TU", "start": first.Format("2006-01-02T15:04"), "duration_minutes": 120}
	r := w.do(http.MethodPost, "/api/v1/series", researcher, body, nil)
	occurrence := "occurrence " + third.UTC().Format(time.RFC3339)
	if r.StatusCode != 409 || !fieldNamed(r, occurrence) {
		t.Fatalf("series over a taken slot: %d %s", r.StatusCode, r.Body)
	}
	// Nothing of it was booked.
	var slots list[calendarSlot]
	q := "/api/v1/bookings?instrument_id=" + w.instr.ID + "&from=" + first.UTC().Format(time.RFC3339) + "&to=" + first.AddDate(0, 1, 0).UTC().Format(time.RFC3339)
	w.do(http.MethodGet, q, researcher, nil, &slots)
	if len(slots.Items) != 1 {
		t.Fatalf("after a refused series: %d bookings, want only the blocking one", len(slots.Items))
	}
	body["book_free"] = true
	var res scheduling.SeriesResult
	if r := w.do(http.MethodPost, "/api/v1/series", researcher, body, &res); r.StatusCode != 201 {
		t.Fatalf("book free: %d %s", r.StatusCode, r.Body)
	}
	if len(res.Booked) != 3 || len(res.Conflicts) != 1 || !res.Conflicts[0].Start.Equal(third) {
		t.Fatalf("booked %d, conflicts %+v", len(res.Booked), res.Conflicts)
	}
	for _, b := range res.Booked {
		// Each instance keeps 09:00 local wall time [published: RFC 5545 §3.3.10].
		if l := b.Start.In(berlin); l.Hour() != 9 || l.Minute() != 0 || l.Weekday() != time.Tuesday || b.SeriesID != res.Series.ID {
			t.Fatalf("instance %s (%s) series %q", b.Start, l, b.SeriesID)
		}
	}
	// Cancel the rest of the series from the second instance on.
	var cancelled list[scheduling.Booking]
	from := res.Booked[1].Start.Format(time.RFC3339)
	if r := w.do(http.MethodPost, "/api/v1/series/"+res.Series.ID+"/cancel", researcher, map[string]string{"reason": "project paused", "from": from}, &cancelled); r.StatusCode != 200 {
		t.Fatalf("cancel rest: %d %s", r.StatusCode, r.Body)
	}
	if len(cancelled.Items) != 2 {
		t.Fatalf("cancelled %d, want 2", len(cancelled.Items))
	}
	var got seriesAnswer
	w.do(http.MethodGet, "/api/v1/series/"+res.Series.ID, researcher, nil, &got)
	active := 0
	for _, b := range got.Bookings {
		if b.Status == scheduling.StatusActive {
			active++
		}
	}
	if active != 1 || len(got.Bookings) != 3 {
		t.Fatalf("series now %d bookings, %d active", len(got.Bookings), active)
	}
	// Someone outside the project sees nothing of it.
	if r := w.do(http.MethodGet, "/api/v1/series/"+res.Series.ID, w.login("other@test.example", testPassword).AccessToken, nil, nil); r.StatusCode != 404 {
		t.Fatalf("foreign series: %d", r.StatusCode)
	}
}
