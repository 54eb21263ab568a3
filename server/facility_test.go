package server

import (
	"net/http"
	"testing"

	"beamledger/accounts"
	"beamledger/scheduling"
)

func TestFacilitySetUp(t *testing.T) {
	w := newWorld(t)
	manager := w.tokens[accounts.RoleManager]
	var f scheduling.Facility
	r := w.do(http.MethodPut, "/api/v1/facility", manager, map[string]string{"name": " Ridge Lab ", "time_zone": "America/New_York", "currency": "usd"}, &f)
	if r.StatusCode != 200 || f != (scheduling.Facility{Name: "Ridge Lab", TimeZone: "America/New_York", Currency: "USD"}) {
		t.Fatalf("set facility: %d %+v", r.StatusCode, f)
	}
	var got scheduling.Facility
	w.do(http.MethodGet, "/api/v1/facility", w.tokens[accounts.RoleResearcher], nil, &got)
	if got != f {
		t.Fatalf("read back %+v, want %+v", got, f)
	}
	r = w.do(http.MethodPut, "/api/v1/facility", manager, map[string]string{"name": "X", "time_zone": "Mars/Olympus", "currency": "euro"}, nil)
	if r.StatusCode != 400 {
		t.Fatalf("bad zone and currency: %d", r.StatusCode)
	}
	for _, field := range []string{"time_zone", "currency"} {
		if !fieldNamed(r, field) {
			t.Errorf("error does not name %s: %s", field, r.Body)
		}
	}
}
