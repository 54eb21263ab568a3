package postgres_test

import (
	"context"
	"slices"
	"testing"
	"time"

	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// TestStatementBookingsReadInTheComputationsSnapshot: a month's statements read their
// bookings on a connection of their own when the pool has one free, in the snapshot of
// the computing transaction taken once its locks are held, so a booking another
// session commits after that is not read; with no connection free they are read in
// the computing transaction itself, which then sees it (READ COMMITTED, as every read
// of a computation did before). Both give the same statements.
func TestStatementBookingsReadInTheComputationsSnapshot(t *testing.T) {
	url := pgtest.NewDatabase(t)
	ctx := context.Background()
	open := func(conns int32) *postgres.DB {
		t.Helper()
		db, err := postgres.Open(ctx, url, conns)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(db.Close)
		return db
	}
	db, alone := open(8), open(1)
	from := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	to := from.AddDate(0, 1, 0)
	mgr, pi, in := billingFacility(t, db, from)
	p := fundedProject(t, db, mgr, pi, "P-1").ID
	at := func(day int) time.Time { return from.AddDate(0, 0, day).Add(9 * time.Hour) }
	first := mustBook(t, db, in.ID, p, pi.ID, at(1), at(1).Add(time.Hour))

	var meanwhile string
	ids, elsewhere, err := db.StatementBookingsRead(ctx, p, from, to, 2, func() {
		meanwhile = mustBook(t, db, in.ID, p, pi.ID, at(2), at(2).Add(time.Hour))
	})
	if err != nil || !elsewhere || !slices.Equal(ids, []string{first}) {
		t.Errorf("with a free connection: read %v elsewhere %v (%v), want only %s, elsewhere", ids, elsewhere, err, first)
	}
	// One project, or no connection free: read in the computing transaction.
	if _, elsewhere, err := db.StatementBookingsRead(ctx, p, from, to, 1, func() {}); err != nil || elsewhere {
		t.Errorf("one project: read elsewhere %v (%v)", elsewhere, err)
	}
	var later string
	ids, elsewhere, err = alone.StatementBookingsRead(ctx, p, from, to, 2, func() {
		later = mustBook(t, db, in.ID, p, pi.ID, at(3), at(3).Add(time.Hour))
	})
	slices.Sort(ids)
	want := []string{first, meanwhile, later}
	slices.Sort(want)
	if err != nil || elsewhere || !slices.Equal(ids, want) {
		t.Errorf("with no connection free: read %v elsewhere %v (%v), want %v in the transaction", ids, elsewhere, err, want)
	}

	// The same statements either way: computed on one connection, then recomputed
	// with the bookings read on another, the draft comes out the same and nothing new
	// is written.
	other := fundedProject(t, db, mgr, pi, "P-2").ID
	mustBook(t, db, in.ID, other, pi.ID, at(4), at(4).Add(90*time.Minute))
	projects := []string{p, other}
	sts, err := alone.ComputeStatements(ctx, projects, from, to, mgr.ID, to)
	if err != nil {
		t.Fatal(err)
	}
	events := func() int {
		t.Helper()
		evs, err := db.EventsFor(ctx, "statement", sts[0].Record().ID)
		if err != nil {
			t.Fatal(err)
		}
		return len(evs)
	}
	before := events()
	again, err := db.ComputeStatements(ctx, projects, from, to, mgr.ID, to.Add(time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	for i := range sts {
		a, b := sts[i].Record(), again[i].Record()
		// [constructed] three 1 h bookings at 120/h → 360.00; one of 90 min → 180.00.
		if wantTotal := []int64{36000, 18000}[i]; a.TotalMinor != wantTotal || b.TotalMinor != wantTotal || len(a.Lines) != len(b.Lines) {
			t.Errorf("project %d: %d with %d lines on one connection, %d with %d on two; want %d", i, a.TotalMinor, len(a.Lines), b.TotalMinor, len(b.Lines), wantTotal)
		}
	}
	if n := events(); n != before {
		t.Errorf("recomputing with the bookings read elsewhere wrote %d new events: the drafts differ", n-before)
	}
}
