package postgres_test

import (
	"context"
	"testing"
	"time"

	"beamledger/scheduling"

	"github.com/jackc/pgx/v5"
)

// TestBookingRulesReadRunsOnKeptPlan checks that the rules read of a booking runs on
// the plan PostgreSQL keeps for it, with or without a transaction around it, once the
// bookings table is large enough that PostgreSQL, left to choose, plans it afresh for
// every call (a few thousand analysed rows do it; without the setting every read here
// came out as a fresh plan). Within a transaction the session's own setting is back in
// force after the read. The same holds for the statement that books from a kept
// context.
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
	// The one statement that books from a kept context reads overlaps too, and would be
	// planned afresh for every call as well.
	generic, custom, err := db.KeptBookingPlans(ctx, nb, 12)
	if err != nil {
		t.Fatal(err)
	}
	if generic != 12 || custom != 0 {
		t.Errorf("booking from a kept context: %d statements on the kept plan and %d planned afresh, want 12 and 0", generic, custom)
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

// TestBookingInsertRetriesDeadlock provokes the deadlock that concurrent inserts
// checked by one exclusion constraint can meet, and checks that both the bare insert
// (the booking benchmark's anchor) and a booking's creation come through it: PostgreSQL
// aborts one side to break the cycle, and that side tries again instead of failing.
//
// A transaction holds an uncommitted booking A; the insert under test puts in B, which
// overlaps A, and waits for that transaction; the transaction then inserts C, which
// overlaps B alone, and waits in turn. The insert under test waited first, so its
// deadlock check (after the default second) runs first and aborts it; the
// transaction's own check is set 30 s away. The transaction then rolls back, and the
// retried insert of B succeeds.
func TestBookingInsertRetriesDeadlock(t *testing.T) {
	w := newKeptWorld(t)
	db, conn, from, pi, in, p := w.db, w.raw, w.from, w.pi, w.in, w.p
	ctx := context.Background()
	paths := []struct {
		name   string
		insert func(scheduling.NewBooking) error
	}{
		{"bare insert", func(nb scheduling.NewBooking) error { return db.InsertBookingRow(ctx, nb) }},
		{"booking creation", func(nb scheduling.NewBooking) error {
			_, err := db.CreateBooking(ctx, nb, t0, func(scheduling.BookingContext) error { return nil })
			return err
		}},
	}
	for day, path := range paths {
		at := func(minutes int) time.Time { return from.AddDate(0, 0, day).Add(time.Duration(minutes) * time.Minute) }
		insert := func(tx pgx.Tx, start, end time.Time) error {
			_, err := tx.Exec(ctx, `
INSERT INTO bookings (instrument_id, project_id, user_id, kind, during, created_at, created_by, updated_at)
VALUES ($1, $2, $3, 'independent', tstzrange($4, $5, '[)'), now(), 'test', now())`, in.ID, p.ID, pi.ID, start, end)
			return err
		}
		tx, err := conn.Begin(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := tx.Exec(ctx, `SET LOCAL deadlock_timeout = '30s'`); err != nil {
			t.Fatal(err)
		}
		if err := insert(tx, at(600), at(660)); err != nil { // A: 10:00–11:00
			t.Fatal(err)
		}
		done := make(chan error, 1)
		go func() {
			done <- path.insert(scheduling.NewBooking{InstrumentID: in.ID, ProjectID: p.ID, UserID: pi.ID, // B: 10:30–12:00
				Kind: scheduling.KindIndependent, Start: at(630), End: at(720), Actor: pi.ID})
		}()
		// Wait until B's insert waits for this transaction (other tests' databases share
		// the cluster, so any other wait proves nothing).
		for waiting := false; !waiting; {
			if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_locks WHERE NOT granted AND pg_backend_pid() = ANY (pg_blocking_pids(pid)))`).Scan(&waiting); err != nil {
				t.Fatal(err)
			}
			time.Sleep(5 * time.Millisecond)
		}
		began := time.Now()
		if err := insert(tx, at(690), at(750)); err != nil { // C: 11:30–12:30, waits until B's insert is aborted
			t.Fatalf("%s: the transaction's insert: %v", path.name, err)
		}
		// C can go in only once B's transaction has ended, and B cannot commit while A
		// stands: only the deadlock check (a second after B began waiting) ends it.
		// Without that wait the test would prove nothing.
		if waited := time.Since(began); waited < 500*time.Millisecond {
			t.Fatalf("%s: the transaction's insert waited %v; the deadlock was not met", path.name, waited)
		}
		if err := tx.Rollback(ctx); err != nil {
			t.Fatal(err)
		}
		if err := <-done; err != nil {
			t.Errorf("%s after a deadlock: %v, want it retried and made", path.name, err)
		}
		var n int
		if err := conn.QueryRow(ctx, `SELECT count(*) FROM bookings WHERE during = tstzrange($1, $2, '[)')`, at(630), at(720)).Scan(&n); err != nil {
			t.Fatal(err)
		}
		if n != 1 {
			t.Errorf("%s: %d bookings of the retried range, want 1", path.name, n)
		}
	}
}
