package postgres_test

import (
	"bytes"
	"context"
	"encoding/json"
	"reflect"
	"strings"
	"testing"
	"time"

	"beamledger/provenance"
	"beamledger/scheduling"
)

// TestComputeStatementsForManyProjects computes a month's drafts of several projects
// in one call: a new statement, a draft recomputed in place, an issued statement left
// alone and a project named twice; then a call in which one project cannot be priced
// stores nothing for any of them.
func TestComputeStatementsForManyProjects(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	from := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	to := from.AddDate(0, 1, 0)
	mgr, pi, in := billingFacility(t, db, from)
	project := func(code string, funded bool) string {
		if funded {
			return fundedProject(t, db, mgr, pi, code).ID
		}
		return mustCreateProject(t, db, code, pi.ID).ID
	}
	book := func(projectID string, start time.Time, d time.Duration) {
		t.Helper()
		if err := db.InsertBookingRow(ctx, scheduling.NewBooking{InstrumentID: in.ID, ProjectID: projectID, UserID: pi.ID,
			Kind: scheduling.KindIndependent, Start: start, End: start.Add(d), Actor: pi.ID}); err != nil {
			t.Fatal(err)
		}
	}
	fresh, redo, issued := project("P-1", true), project("P-2", true), project("P-3", true)
	book(fresh, from.Add(9*time.Hour), 2*time.Hour)
	book(fresh, to.Add(9*time.Hour), 2*time.Hour) // next month: not on this statement
	book(redo, from.Add(33*time.Hour), time.Hour)
	book(issued, from.Add(57*time.Hour), time.Hour)
	earlier, _, err := db.ComputeStatement(ctx, redo, from, to, mgr.ID, to)
	if err != nil {
		t.Fatal(err)
	}
	done, _, err := db.ComputeStatement(ctx, issued, from, to, mgr.ID, to)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.IssueStatement(ctx, done.Record().ID, mgr.ID, to); err != nil {
		t.Fatal(err)
	}
	book(redo, from.Add(81*time.Hour), 30*time.Minute)

	sts, err := db.ComputeStatements(ctx, []string{fresh, redo, issued, fresh}, from, to, mgr.ID, to.Add(time.Hour))
	if err != nil || len(sts) != 4 {
		t.Fatalf("compute: %d drafts, %v", len(sts), err)
	}
	// [constructed] 2 h booked, no usage, at 120/h → 240.00; the next month's booking
	// is not on it.
	if r := sts[0].Record(); r.ProjectID != fresh || r.TotalMinor != 24000 || len(r.Lines) != 1 || r.Status != scheduling.StatementDraft {
		t.Errorf("new draft: %+v", r)
	}
	// [constructed] 1 h at 120/h, and 30 min billed as the policy's minimum hour → 240.00,
	// in the earlier draft's statement.
	if r := sts[1].Record(); r.ID != earlier.Record().ID || r.TotalMinor != 24000 || len(r.Lines) != 2 {
		t.Errorf("recomputed draft: %+v, earlier id %s", r, earlier.Record().ID)
	}
	if r := sts[2].Record(); r.ID != "" {
		t.Errorf("issued statement got a draft: %+v", r)
	}
	if sts[3].Record().ID != sts[0].Record().ID {
		t.Errorf("a project named twice got two statements: %s and %s", sts[0].Record().ID, sts[3].Record().ID)
	}
	for _, st := range sts[:2] {
		want := st.Record()
		stored, err := db.Statement(ctx, want.ID)
		if err != nil {
			t.Fatal(err)
		}
		if got := stored.Record(); got.TotalMinor != want.TotalMinor || len(got.Lines) != len(want.Lines) || got.ProjectID != want.ProjectID {
			t.Errorf("stored statement %s: total %d with %d lines, returned %d with %d", want.ID, got.TotalMinor, len(got.Lines), want.TotalMinor, len(want.Lines))
		}
	}
	if got, err := db.Statement(ctx, done.Record().ID); err != nil || got.Record().Status != scheduling.StatementIssued || got.Record().TotalMinor != 12000 {
		t.Errorf("issued statement after the batch: %+v %v", got.Record(), err)
	}
	// Each statement's ledger events: create, then correct for a recompute, each
	// holding the statement as stored.
	for _, c := range []struct {
		st      scheduling.Statement
		actions []string
	}{
		{sts[0], []string{provenance.ActionCreate}},
		{sts[1], []string{provenance.ActionCreate, provenance.ActionCorrect}},
	} {
		evs, err := db.EventsFor(ctx, provenance.EntityStatement, c.st.Record().ID)
		if err != nil || len(evs) != len(c.actions) {
			t.Fatalf("events of %s: %d, %v; want %v", c.st.Record().ID, len(evs), err, c.actions)
		}
		for i, ev := range evs {
			if ev.Action != c.actions[i] || ev.Actor != mgr.ID {
				t.Errorf("event %d of %s: %s by %s, want %s by %s", i, c.st.Record().ID, ev.Action, ev.Actor, c.actions[i], mgr.ID)
			}
		}
		var state scheduling.StatementRecord
		if err := json.Unmarshal(evs[len(evs)-1].State, &state); err != nil || state.TotalMinor != c.st.Record().TotalMinor ||
			len(state.Lines) != len(c.st.Record().Lines) {
			t.Errorf("last event of %s holds total %d with %d lines (%v)", c.st.Record().ID, state.TotalMinor, len(state.Lines), err)
		}
	}

	// Recomputing drafts that come out the same writes nothing: no ledger event, and
	// the statements read as before.
	countEvents := func() (n int) {
		t.Helper()
		if err := conn.QueryRow(ctx, `SELECT count(*) FROM ledger_events`).Scan(&n); err != nil {
			t.Fatal(err)
		}
		return n
	}
	quiet := countEvents()
	again, err := db.ComputeStatements(ctx, []string{fresh, redo}, from, to, mgr.ID, to.Add(90*time.Minute))
	if err != nil {
		t.Fatal(err)
	}
	if n := countEvents(); n != quiet {
		t.Errorf("recomputing unchanged drafts wrote %d ledger events", n-quiet)
	}
	for i, st := range again {
		stored, err := db.Statement(ctx, st.Record().ID)
		if err != nil || !reflect.DeepEqual(stored.Record(), sts[i].Record()) || !reflect.DeepEqual(st.Record(), sts[i].Record()) {
			t.Errorf("unchanged recompute of %s: stored %+v (%v)", sts[i].Record().ID, stored.Record(), err)
		}
		// The record read back encodes to the state its event holds, whose digest the
		// row keeps: a printed copy's digest matches the ledger's.
		digest, err := provenance.StateDigest(stored.Record())
		var kept []byte
		if err := conn.QueryRow(ctx, `SELECT state_sha256 FROM statements WHERE id = $1`, st.Record().ID).Scan(&kept); err != nil {
			t.Fatal(err)
		}
		if err != nil || !bytes.Equal(kept, digest[:]) {
			t.Errorf("statement %s: state digest %x read back, %x kept (%v)", st.Record().ID, digest, kept, err)
		}
	}

	// A project whose charged booking has no split to post to fails the whole call:
	// nothing is stored for the others either.
	unfunded := project("P-4", false)
	book(unfunded, from.Add(105*time.Hour), time.Hour)
	book(fresh, from.Add(129*time.Hour), time.Hour)
	var before int
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM ledger_events`).Scan(&before); err != nil {
		t.Fatal(err)
	}
	if _, err := db.ComputeStatements(ctx, []string{fresh, unfunded}, from, to, mgr.ID, to.Add(2*time.Hour)); err == nil {
		t.Fatal("a batch with an unfunded charged booking succeeded")
	}
	var after int
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM ledger_events`).Scan(&after); err != nil {
		t.Fatal(err)
	}
	kept, err := db.Statement(ctx, sts[0].Record().ID)
	if err != nil {
		t.Fatal(err)
	}
	lines := len(kept.Record().Lines)
	if after != before || lines != 1 {
		t.Errorf("failed batch left %d new ledger events and %d lines on %s (want 0 and 1)", after-before, lines, sts[0].Record().ID)
	}
}

// TestStatementReadsEveryUsageAndOwnSplit prices bookings from everything read beside
// each one: a booking checked in twice is charged for both usages, a booking with its
// own split posts to that split, and a booking that cannot be priced is named, the
// first of its project's by start when several cannot.
func TestStatementReadsEveryUsageAndOwnSplit(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	from := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	to := from.AddDate(0, 1, 0)
	mgr, pi, in := billingFacility(t, db, from)
	p := fundedProject(t, db, mgr, pi, "P-1")
	at := func(h, m int) time.Time { return from.Add(time.Duration(h)*time.Hour + time.Duration(m)*time.Minute) }
	twice := mustBook(t, db, in.ID, p.ID, pi.ID, at(9, 0), at(11, 0))
	for _, u := range [][2]time.Time{{at(9, 0), at(10, 0)}, {at(10, 30), at(12, 30)}} {
		if _, err := db.CheckIn(ctx, twice, u[0], pi.ID, scheduling.SourceUser); err != nil {
			t.Fatal(err)
		}
		if _, err := db.CheckOut(ctx, twice, u[1], pi.ID); err != nil {
			t.Fatal(err)
		}
	}
	other, err := db.SaveFundingAccount(ctx, scheduling.FundingAccount{ProjectID: p.ID, Code: "G-OWN"}, mgr.ID, t0)
	if err != nil {
		t.Fatal(err)
	}
	ownID := mustBook(t, db, in.ID, p.ID, pi.ID, at(13, 0), at(14, 0))
	own, err := db.Booking(ctx, ownID)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.SetBookingFunding(ctx, own, []scheduling.FundingShare{{AccountID: other.ID, BasisPoints: 10000}}, mgr.ID, t0); err != nil {
		t.Fatal(err)
	}
	st, _, err := db.ComputeStatement(ctx, p.ID, from, to, mgr.ID, to)
	if err != nil {
		t.Fatal(err)
	}
	lines := st.Record().Lines
	if len(lines) != 2 {
		t.Fatalf("%d lines, want 2: %+v", len(lines), lines)
	}
	// [constructed] booked 2 h, used 09:00–10:00 and 10:30–12:30 (3 h): the greater, 3 h
	// at 120/h → 360.00. Without the second usage it would be the booked 2 h, 240.00.
	if l := lines[0]; l.BookingID != twice || l.Minutes != 180 || l.AmountMinor != 36000 {
		t.Errorf("booking used twice: %+v", l)
	}
	// [constructed] 1 h booked at 120/h → 120.00, all to the booking's own account.
	if l := lines[1]; l.BookingID != ownID || l.AmountMinor != 12000 || len(l.Allocations) != 1 || l.Allocations[0].AccountID != other.ID {
		t.Errorf("booking with its own split: %+v", l)
	}

	// Two bookings on an instrument without a rate schedule: the error names the
	// earlier, whatever order the read brings them in.
	bare := mustCreateInstrument(t, db, "TEM-2")
	late := mustBook(t, db, bare.ID, p.ID, pi.ID, at(40, 0), at(41, 0))
	early := mustBook(t, db, bare.ID, p.ID, pi.ID, at(30, 0), at(31, 0))
	_, _, err = db.ComputeStatement(ctx, p.ID, from, to, mgr.ID, to)
	if err == nil || !strings.Contains(err.Error(), early) || strings.Contains(err.Error(), late) {
		t.Errorf("pricing error %v, want one naming booking %s only", err, early)
	}
}
