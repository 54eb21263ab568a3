package server

import (
	"context"
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

func TestWaitlistOfferAcceptAndLapse(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	other := w.login("other@test.example", testPassword).AccessToken
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	w.qualify(w.other.ID, scheduling.LevelIndependent)
	start := w.nextTuesday(9, 0)
	var held bookingAnswer
	w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(3*time.Hour), scheduling.KindIndependent), &held)
	wait := map[string]any{"instrument_id": w.instr.ID, "project_id": w.foreign.ID, "kind": "independent",
		"start": start.Add(time.Hour).Format(time.RFC3339), "end": start.Add(2 * time.Hour).Format(time.RFC3339)}
	var first, second scheduling.WaitlistEntry
	if r := w.do(http.MethodPost, "/api/v1/waitlist", other, wait, &first); r.StatusCode != 201 || first.Status != scheduling.WaitlistWaiting {
		t.Fatalf("join: %d %s", r.StatusCode, r.Body)
	}
	// A later, overlapping request by the researcher queues behind it.
	wait2 := w.bookingBody(start.Add(90*time.Minute), start.Add(150*time.Minute), scheduling.KindIndependent)
	w.do(http.MethodPost, "/api/v1/waitlist", researcher, wait2, &second)
	// Staff cannot queue someone for a project they are not in: no booking could come of it.
	stranger := map[string]any{"instrument_id": w.instr.ID, "project_id": w.own.ID, "user_id": w.other.ID, "kind": "independent",
		"start": start.Add(time.Hour).Format(time.RFC3339), "end": start.Add(2 * time.Hour).Format(time.RFC3339)}
	if r := w.do(http.MethodPost, "/api/v1/waitlist", w.tokens[accounts.RoleStaff], stranger, nil); r.StatusCode != 400 || !fieldNamed(r, "user_id") {
		t.Fatalf("staff waitlisting a non-member: %d %s", r.StatusCode, r.Body)
	}
	// Waiting for a free range is refused: book it.
	free := map[string]any{"instrument_id": w.instr.ID, "project_id": w.foreign.ID, "kind": "independent",
		"start": start.Add(5 * time.Hour).Format(time.RFC3339), "end": start.Add(6 * time.Hour).Format(time.RFC3339)}
	if r := w.do(http.MethodPost, "/api/v1/waitlist", other, free, nil); r.StatusCode != 409 {
		t.Fatalf("waiting for free time: %d %s", r.StatusCode, r.Body)
	}
	// The holder cancels: the oldest entry is offered, the overlapping later one waits.
	if r := w.do(http.MethodPost, "/api/v1/bookings/"+held.ID+"/cancel", researcher, map[string]string{"reason": "plans changed"}, nil); r.StatusCode != 200 {
		t.Fatalf("cancel: %d %s", r.StatusCode, r.Body)
	}
	var got scheduling.WaitlistEntry
	if got, _ = w.db.WaitlistEntry(context.Background(), first.ID); got.Status != scheduling.WaitlistOffered || got.OfferExpiresAt == nil {
		t.Fatalf("first after cancel: %+v", got)
	}
	if got, _ = w.db.WaitlistEntry(context.Background(), second.ID); got.Status != scheduling.WaitlistWaiting {
		t.Fatalf("second after cancel: %+v", got)
	}
	// While it is on offer, the time is held: nobody else books it.
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start.Add(time.Hour), start.Add(2*time.Hour), scheduling.KindIndependent), nil); r.StatusCode != 409 || !contains(r.Body, "held for a waitlist offer") {
		t.Fatalf("booking held time: %d %s", r.StatusCode, r.Body)
	}
	// Nobody else accepts someone's offer; its owner lets it lapse, and it passes on.
	if r := w.do(http.MethodPost, "/api/v1/waitlist/"+first.ID+"/accept", researcher, nil, nil); r.StatusCode != 404 {
		t.Fatalf("accepting someone else's offer: %d", r.StatusCode)
	}
	w.clock.Advance(2*time.Hour + time.Minute)
	lapsed, err := w.db.LapseOffers(context.Background(), w.clock.Now())
	if err != nil || len(lapsed) != 1 || lapsed[0] != first.ID {
		t.Fatalf("lapsed %v %v", lapsed, err)
	}
	if got, _ = w.db.WaitlistEntry(context.Background(), second.ID); got.Status != scheduling.WaitlistOffered {
		t.Fatalf("second after the first lapsed: %+v", got)
	}
	researcher = w.login("researcher@test.example", testPassword).AccessToken
	var acc offerAccepted
	if r := w.do(http.MethodPost, "/api/v1/waitlist/"+second.ID+"/accept", researcher, nil, &acc); r.StatusCode != 200 {
		t.Fatalf("accept: %d %s", r.StatusCode, r.Body)
	}
	if acc.Entry.Status != scheduling.WaitlistBooked || acc.Booking.ID == "" || !acc.Booking.Start.Equal(start.Add(90*time.Minute)) {
		t.Fatalf("accepted %+v", acc)
	}
	if r := w.do(http.MethodPost, "/api/v1/waitlist/"+second.ID+"/accept", researcher, nil, nil); r.StatusCode != 409 {
		t.Fatalf("accepting twice: %d", r.StatusCode)
	}
}
