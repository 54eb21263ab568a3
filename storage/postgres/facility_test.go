package postgres_test

import (
	"context"
	"testing"

	"beamledger"
	"beamledger/scheduling"
	"beamledger/storage/postgres/pgtest"
)

func TestFacility(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()

	_, err := db.Facility(ctx)
	wantKind(t, err, beamledger.ErrNotFound)

	first := scheduling.Facility{Name: "Electron Microscopy Centre", TimeZone: "Europe/Berlin", Currency: "EUR"}
	got, err := db.SetFacility(ctx, first)
	if err != nil || got != first {
		t.Fatalf("SetFacility = %+v, %v; want %+v", got, err, first)
	}
	if got, err := db.Facility(ctx); err != nil || got != first {
		t.Fatalf("Facility = %+v, %v; want %+v", got, err, first)
	}

	// There is one facility: setting it again replaces it.
	second := scheduling.Facility{Name: "Microscopy Core", TimeZone: "America/Chicago", Currency: "USD"}
	if got, err := db.SetFacility(ctx, second); err != nil || got != second {
		t.Fatalf("SetFacility again = %+v, %v; want %+v", got, err, second)
	}
	if got, err := db.Facility(ctx); err != nil || got != second {
		t.Fatalf("Facility = %+v, %v; want %+v", got, err, second)
	}

	// The schema refuses what Normalize would have, and the stored facility stays.
	for _, bad := range []scheduling.Facility{
		{Name: "X", TimeZone: "UTC", Currency: "eur"},
		{Name: "", TimeZone: "UTC", Currency: "EUR"},
	} {
		_, err := db.SetFacility(ctx, bad)
		wantKind(t, err, beamledger.ErrInvalid)
	}
	if got, err := db.Facility(ctx); err != nil || got != second {
		t.Errorf("after refused updates Facility = %+v, %v; want %+v", got, err, second)
	}
}
