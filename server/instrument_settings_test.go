package server

import (
	"context"
	"net/http"
	"slices"
	"testing"
	"time"

	"github.com/google/uuid"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// exerciseInstrumentBookable closes an instrument to bookings and opens it again; the
// body must say which it is to be.
func exerciseInstrumentBookable(t *testing.T, w *world) {
	manager := w.tokens[accounts.RoleManager]
	in := w.instr
	path := "/api/v1/instruments/" + in.ID + "/bookable"
	before, err := w.db.EventsFor(context.Background(), provenance.EntityInstrument, in.ID)
	if err != nil {
		t.Fatal(err)
	}
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
	// Closing and reopening are two ledger events; the refused attempts none.
	after, err := w.db.EventsFor(context.Background(), provenance.EntityInstrument, in.ID)
	if err != nil || len(after) != len(before)+2 || !contains(after[len(after)-1].State, `"bookable":true`) {
		t.Errorf("ledger events of the instrument: %d before, %d after (%v)", len(before), len(after), err)
	}
}

// exerciseInstrumentCapabilities edits a new instrument's capabilities: the new ones
// are stored and read back, detectors replaced as a whole; bad values are named; the
// code cannot be changed this way.
func exerciseInstrumentCapabilities(t *testing.T, w *world) {
	manager := w.tokens[accounts.RoleManager]
	var in scheduling.Instrument
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments", manager, map[string]any{"code": "CAP-TEM", "name": "Old TEM", "kind": "tem",
		"accelerating_voltages_v": []float64{200e3}, "detectors": []map[string]any{{"name": "CCD", "kind": "camera"}}}, &in)
	path := "/api/v1/instruments/" + in.ID + "/capabilities"
	body := map[string]any{"name": "Upgraded STEM", "kind": "stem", "location": "Hall 2", "accelerating_voltages_v": []float64{300e3, 80e3, 300e3},
		"corrector": "probe", "detectors": []map[string]any{{"name": "HAADF", "kind": "annular", "inner_radius_m": 0.004, "outer_radius_m": 0.012}}}
	var got scheduling.Instrument
	w.expect(http.StatusOK, http.MethodPut, path, manager, body, &got)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/instruments/"+in.ID, w.tokens[accounts.RoleResearcher], nil, &got)
	if got.Code != "CAP-TEM" || got.Name != "Upgraded STEM" || got.Kind != scheduling.KindSTEM || got.Location != "Hall 2" ||
		!slices.Equal(got.AcceleratingVoltagesV, []float64{80e3, 300e3}) || got.Corrector != scheduling.CorrectorProbe ||
		len(got.Detectors) != 1 || got.Detectors[0].Name != "HAADF" || got.Bookable != in.Bookable {
		t.Errorf("instrument after the edit %+v", got)
	}
	// Its creation and the change are in the ledger, by the manager, each holding the
	// instrument as it then stood.
	evs, err := w.db.EventsFor(context.Background(), provenance.EntityInstrument, in.ID)
	managerID := w.users[accounts.RoleManager].ID
	if err != nil || len(evs) != 2 || evs[0].Action != provenance.ActionCreate || !contains(evs[0].State, `"name":"Old TEM"`) ||
		evs[1].Action != provenance.ActionCorrect || evs[0].Actor != managerID || evs[1].Actor != managerID ||
		!contains(evs[1].State, `"name":"Upgraded STEM"`) || !contains(evs[1].State, `"HAADF"`) {
		t.Errorf("ledger events of the edited instrument: %v %+v", err, evs)
	}
	bad := map[string]any{"name": " ", "kind": "stem", "accelerating_voltages_v": []float64{300}, "detectors": []map[string]any{}}
	if r := w.expect(http.StatusBadRequest, http.MethodPut, path, manager, bad, nil); !fieldNamed(r, "name") || !contains(r.Body, "accelerating_voltages_v") {
		t.Errorf("bad capabilities not named: %s", r.Body)
	}
	body["code"] = "NEW-CODE"
	w.expect(http.StatusBadRequest, http.MethodPut, path, manager, body, nil)
	delete(body, "code")
	w.expect(http.StatusForbidden, http.MethodPut, path, w.tokens[accounts.RoleStaff], body, nil)
	w.expect(http.StatusNotFound, http.MethodPut, "/api/v1/instruments/"+uuid.NewString()+"/capabilities", manager, body, nil)
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
