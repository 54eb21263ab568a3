package server

import (
	"net/http"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

func TestBookingRulesAreManagedPerFacilityAndInstrument(t *testing.T) {
	w := newWorld(t)
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	var got rulesAnswer
	if r := w.do(http.MethodGet, "/api/v1/facility/booking-rules", researcher, nil, &got); r.StatusCode != 200 || got.Effective.SlotMinutes != 15 {
		t.Fatalf("defaults: %d %+v", r.StatusCode, got.Effective)
	}
	// The instrument books on the hour; the facility keeps quarter hours.
	sixty := 60
	if r := w.do(http.MethodPut, "/api/v1/instruments/"+w.instr.ID+"/booking-rules", manager, scheduling.RulesOverride{SlotMinutes: &sixty}, &got); r.StatusCode != 200 || got.Effective.SlotMinutes != 60 {
		t.Fatalf("instrument override: %d %s", r.StatusCode, r.Body)
	}
	start := w.nextTuesday(9, 30)
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), nil); r.StatusCode != 422 || !contains(r.Body, `"rule":"slot"`) {
		t.Fatalf("half-hour start on an hourly instrument: %d %s", r.StatusCode, r.Body)
	}
	// Invalid rules are refused naming the field, and nothing changes.
	seven := 7
	if r := w.do(http.MethodPut, "/api/v1/facility/booking-rules", manager, scheduling.RulesOverride{SlotMinutes: &seven}, nil); r.StatusCode != 400 || !fieldNamed(r, "slot_minutes") {
		t.Fatalf("7-minute slots: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodPut, "/api/v1/facility/booking-rules", researcher, scheduling.RulesOverride{}, nil); r.StatusCode != 403 {
		t.Fatalf("researcher sets rules: %d", r.StatusCode)
	}
}

func TestQuotasAndFairShare(t *testing.T) {
	w := newWorld(t)
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	q := scheduling.Quota{ProjectID: w.own.ID, InstrumentID: w.instr.ID, Period: scheduling.PeriodWeek, AllocatedMinutes: 600}
	if r := w.do(http.MethodPut, "/api/v1/quotas", manager, q, nil); r.StatusCode != 200 {
		t.Fatalf("set quota: %d %s", r.StatusCode, r.Body)
	}
	start := w.nextTuesday(9, 0)
	w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(3*time.Hour), scheduling.KindIndependent), nil)
	var lines list[scheduling.ShareLine]
	path := "/api/v1/reports/fair-share?period=week&at=" + start.UTC().Format(time.RFC3339)
	if r := w.do(http.MethodGet, path, researcher, nil, &lines); r.StatusCode != 200 {
		t.Fatalf("fair share: %d %s", r.StatusCode, r.Body)
	}
	// [constructed] 3 h booked of 10 h allocated: 180 min, 300 per mille; nothing used yet.
	if len(lines.Items) != 1 || lines.Items[0].AllocatedMinutes != 600 || lines.Items[0].BookedMinutes != 180 ||
		lines.Items[0].BookedPermille != 300 || lines.Items[0].UsedMinutes != 0 {
		t.Fatalf("lines %+v", lines.Items)
	}
	// Another researcher sees none of that project's lines.
	other := w.login("other@test.example", testPassword).AccessToken
	w.do(http.MethodGet, path, other, nil, &lines)
	if len(lines.Items) != 0 {
		t.Fatalf("foreign researcher sees %+v", lines.Items)
	}
	if r := w.do(http.MethodGet, "/api/v1/quotas?project_id="+w.own.ID, other, nil, nil); r.StatusCode != 404 {
		t.Fatalf("foreign quotas: %d", r.StatusCode)
	}
}
