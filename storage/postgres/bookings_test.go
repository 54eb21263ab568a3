package postgres_test

import (
	"context"
	"testing"
	"time"

	"beamledger/scheduling"
)

// TestBookingRulesReadRunsOnKeptPlan checks that the rules read of a booking runs on
// the plan PostgreSQL keeps for it, with or without a transaction around it, once the
// bookings table is large enough that PostgreSQL, left to choose, plans it afresh for
// every call (a few thousand analysed rows do it; without the setting every read here
// came out as a fresh plan). Within a transaction the session's own setting is back in
// force after the read.
func TestBookingRulesReadRunsOnKeptPlan(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	from := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	mgr, pi, in := billingFacility(t, db, from)
	p := fundedProject(t, db, mgr, pi, "P-1")
	// Three hours apart, an hour each, before the range the reads ask about.
	if _, err := conn.Exec(ctx, `
INSERT INTO bookings (instrument_id, project_id, user_id, kind, during, created_at, created_by, updated_at)
SELECT $1, $2, $3, 'independent', tstzrange($4::timestamptz + make_interval(hours => 3 * k), $4::timestamptz + make_interval(hours => 3 * k + 1), '[)'), $4, 'test', $4
FROM generate_series(1, 4000) k`, in.ID, p.ID, pi.ID, from.AddDate(-2, 0, 0)); err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(ctx, `ANALYZE bookings`); err != nil {
		t.Fatal(err)
	}
	nb := scheduling.NewBooking{InstrumentID: in.ID, ProjectID: p.ID, UserID: pi.ID, Kind: scheduling.KindIndependent,
		Start: from.Add(10 * time.Hour), End: from.Add(11 * time.Hour), Actor: pi.ID}
	for _, inTx := range []bool{false, true} {
		generic, custom, after, err := db.BookingContextPlans(ctx, nb, 12, inTx)
		if err != nil {
			t.Fatal(err)
		}
		if generic != 12 || custom != 0 {
			t.Errorf("in a transaction %v: %d reads on the kept plan and %d planned afresh, want 12 and 0", inTx, generic, custom)
		}
		if after != "auto" {
			t.Errorf("in a transaction %v: plan_cache_mode %q after the reads, want the session's auto", inTx, after)
		}
	}
}

// TestBookingHistoryDerivesCreation checks the first entry of a booking's history.
// Making a booking writes no history row; the entry is derived from the booking row
// and, once the booking has moved, from its first move, so it still shows the range
// the booking was made with. A booking whose creation has a history row (as every
// booking made before that change has) shows that row, once.
func TestBookingHistoryDerivesCreation(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	from := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	mgr, pi, in := billingFacility(t, db, from)
	p := fundedProject(t, db, mgr, pi, "P-1")
	at := func(h int) time.Time { return from.Add(time.Duration(h) * time.Hour) }
	id := mustBook(t, db, in.ID, p.ID, pi.ID, at(9), at(11))
	var rows int
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM booking_events WHERE booking_id = $1`, id).Scan(&rows); err != nil || rows != 0 {
		t.Fatalf("history rows after making a booking: %d, %v; want none", rows, err)
	}
	pass := func(scheduling.Booking, scheduling.BookingContext) error { return nil }
	for i, r := range [][2]time.Time{{at(12), at(14)}, {at(15), at(16)}} {
		if _, err := db.MoveBooking(ctx, id, r[0], r[1], mgr.ID, "instrument swap", t0.Add(time.Duration(i+1)*time.Minute), pass); err != nil {
			t.Fatal(err)
		}
	}
	evs, err := db.BookingEvents(ctx, id)
	if err != nil {
		t.Fatal(err)
	}
	if len(evs) != 3 {
		t.Fatalf("%d entries, want created and two moves: %+v", len(evs), evs)
	}
	c := evs[0]
	if c.Action != "created" || !c.At.Equal(t0) || c.Actor != pi.ID || c.Before != nil || c.After == nil ||
		!c.After.Start.Equal(at(9)) || !c.After.End.Equal(at(11)) {
		t.Errorf("creation entry %+v (range %v), want created at %s by %s with the range it was made with [%s, %s)", c, c.After, t0, pi.ID, at(9), at(11))
	}
	if evs[1].Action != "moved" || !evs[1].Before.Start.Equal(at(9)) || evs[2].Action != "moved" || !evs[2].After.Start.Equal(at(15)) {
		t.Errorf("moves %+v %+v", evs[1], evs[2])
	}

	// A booking whose creation was written as a history row shows that row alone.
	old := mustBook(t, db, in.ID, p.ID, pi.ID, at(20), at(21))
	if _, err := conn.Exec(ctx, `INSERT INTO booking_events (booking_id, at, actor, action, after) VALUES ($1, $2, 'row-writer', 'created', tstzrange($3, $4, '[)'))`,
		old, t0, at(20), at(21)); err != nil {
		t.Fatal(err)
	}
	evs, err = db.BookingEvents(ctx, old)
	if err != nil {
		t.Fatal(err)
	}
	if len(evs) != 1 || evs[0].Action != "created" || evs[0].Actor != "row-writer" {
		t.Errorf("history of a booking with a creation row: %+v, want that row alone", evs)
	}
}
