package server

import (
	"net/http"
	"testing"
	"time"

	"github.com/google/uuid"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// exerciseInstrumentBookable closes an instrument to bookings and opens it again; the
// body must say which it is to be.
func exerciseInstrumentBookable(t *testing.T, w *world) {
	manager := w.tokens[accounts.RoleManager]
	in := w.instr
	path := "/api/v1/instruments/" + in.ID + "/bookable"
	var got scheduling.Instrument
	w.expect(http.StatusOK, http.MethodPut, path, manager, map[string]any{"bookable": false}, &got)
	if got.Bookable {
		t.Errorf("closed instrument still bookable: %+v", got)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/instruments/"+in.ID, manager, nil, &got)
	if got.Bookable {
		t.Errorf("closing did not last: %+v", got)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodPut, path, manager, map[string]any{}, nil); !fieldNamed(r, "bookable") {
		t.Errorf("a body without bookable should name the field: %s", r.Body)
	}
	w.expect(http.StatusNotFound, http.MethodPut, "/api/v1/instruments/"+uuid.NewString()+"/bookable", manager, map[string]any{"bookable": true}, nil)
	w.expect(http.StatusOK, http.MethodPut, path, manager, map[string]any{"bookable": true}, &got)
	if !got.Bookable {
		t.Errorf("reopened instrument not bookable: %+v", got)
	}
}

// TestServiceRangeReversed: service time that ends before it starts is refused naming
// the end, as any booking is, not answered with a server error.
func TestServiceRangeReversed(t *testing.T) {
	w := newWorld(t)
	day := w.clock.Now().AddDate(0, 0, 7).Format(time.DateOnly)
	r := w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/bookings", w.tokens[accounts.RoleStaff],
		map[string]string{"instrument_id": w.instr.ID, "kind": "service", "start": day + "T12:00", "end": day + "T09:00"}, nil)
	if !fieldNamed(r, "end") {
		t.Errorf("a reversed range should name the end: %s", r.Body)
	}
}
