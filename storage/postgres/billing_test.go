package postgres_test

import (
	"context"
	"errors"
	"maps"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgconn"

	"beamledger"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// TestIssuedStatementIsFinalInTheDatabase issues a statement through the store, then
// tries to change it behind the store's back: the database refuses every UPDATE and
// DELETE of the statement and its lines, and a line added to it.
func TestIssuedStatementIsFinalInTheDatabase(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	from := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	mgr, pi, in := billingFacility(t, db, from)
	p := fundedProject(t, db, mgr, pi, "P-1")
	start := from.Add(9 * time.Hour)
	if err := db.InsertBookingRow(ctx, scheduling.NewBooking{InstrumentID: in.ID, ProjectID: p.ID, UserID: pi.ID,
		Kind: scheduling.KindIndependent, Start: start, End: start.Add(2 * time.Hour), Actor: pi.ID}); err != nil {
		t.Fatal(err)
	}
	st, created, err := db.ComputeStatement(ctx, p.ID, from, from.AddDate(0, 1, 0), mgr.ID, from.AddDate(0, 1, 1))
	// [constructed] 2 h booked and no usage, greater of booked and used, at 120/h → 240.00.
	if err != nil || !created || st.Record().TotalMinor != 24000 {
		t.Fatalf("compute: %v created=%v total=%d", err, created, st.Record().TotalMinor)
	}
	id := st.Record().ID
	if _, err := db.IssueStatement(ctx, id, mgr.ID, from.AddDate(0, 1, 2)); err != nil {
		t.Fatal(err)
	}
	// The lines are in the ledger event the row names: neither the row nor the event
	// may change, nor the row be pointed at another event.
	for _, q := range []string{
		`UPDATE statements SET total_minor = 1 WHERE id = $1`,
		`DELETE FROM statements WHERE id = $1`,
		`UPDATE statements SET event_seq = (SELECT min(seq) FROM ledger_events) WHERE id = $1`,
		`UPDATE ledger_events SET leaf = leaf || ' '::bytea WHERE seq = (SELECT event_seq FROM statements WHERE id = $1)`,
		`DELETE FROM ledger_events WHERE seq = (SELECT event_seq FROM statements WHERE id = $1)`,
	} {
		_, err := conn.Exec(ctx, q, id)
		var pgErr *pgconn.PgError
		if !errors.As(err, &pgErr) || pgErr.Code != "23001" { // restrict_violation
			t.Errorf("%s: %v, want restrict_violation", q, err)
		}
	}
	// A later event claiming other lines for the statement (events can be appended by
	// anyone who can write the table) changes nothing shown: the row names its event.
	forged := st.Record()
	forged.Lines[0].AmountMinor, forged.Lines[0].Allocations[0].AmountMinor, forged.TotalMinor = 100, 100, 100
	ev, err := provenance.NewLedgerEvent(mgr.ID, provenance.ActionCorrect, provenance.EntityStatement, id, t0, forged)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(ctx, `INSERT INTO ledger_events (actor, at, action, entity_type, entity_id, leaf) VALUES ($1, $2, $3, $4, $5, $6)`,
		ev.Actor, ev.At, ev.Action, ev.EntityType, ev.EntityID, ev.Leaf); err != nil {
		t.Fatal(err)
	}
	if got, err := db.Statement(ctx, id); err != nil || got.Record().TotalMinor != 24000 || got.Record().Status != scheduling.StatementIssued {
		t.Errorf("issued statement after a forged event: total %d, status %s, %v", got.Record().TotalMinor, got.Record().Status, err)
	}
	if _, _, err := db.ComputeStatement(ctx, p.ID, from, from.AddDate(0, 1, 0), mgr.ID, t0); !errors.Is(err, beamledger.ErrConflict) {
		t.Errorf("recompute of an issued statement: %v, want conflict", err)
	}
	evs, err := db.EventsFor(ctx, provenance.EntityStatement, id)
	if err != nil || len(evs) != 3 || evs[0].Action != provenance.ActionCreate || evs[1].Action != provenance.ActionIssue {
		t.Errorf("statement ledger events %v %v, want create, issue and the forged one", evs, err)
	}
	// Shares of a split must sum to 100 %, checked by the database at commit.
	_, err = conn.Exec(ctx, `UPDATE project_funding SET basis_points = 9000 WHERE project_id = $1`, p.ID)
	var pgErr *pgconn.PgError
	if !errors.As(err, &pgErr) || pgErr.Code != "23514" {
		t.Errorf("split of 90 %%: %v, want check_violation", err)
	}
}

// TestStatementLinesMigrateIntoTheLedger takes a database with an issued and a draft
// statement down to the schema that kept lines as rows (migration 0011) and up again:
// down rebuilds the rows from the ledger events, up checks them against the events
// before dropping them, and the statements and the recovery sums read the same after
// the round trip. A statement whose rows no longer match its event stops the upgrade
// and leaves the rows in place.
func TestStatementLinesMigrateIntoTheLedger(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	from := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	to := from.AddDate(0, 1, 0)
	mgr, pi, in := billingFacility(t, db, from)
	var ids []string
	for i, code := range []string{"P-1", "P-2"} {
		p := fundedProject(t, db, mgr, pi, code)
		for k := range 2 {
			start := from.Add(time.Duration(24*(2*i+k)+9) * time.Hour)
			if err := db.InsertBookingRow(ctx, scheduling.NewBooking{InstrumentID: in.ID, ProjectID: p.ID, UserID: pi.ID,
				Kind: scheduling.KindIndependent, Start: start, End: start.Add(time.Duration(k+1) * time.Hour), Actor: pi.ID}); err != nil {
				t.Fatal(err)
			}
		}
		st, _, err := db.ComputeStatement(ctx, p.ID, from, to, mgr.ID, to.Add(time.Hour))
		if err != nil {
			t.Fatal(err)
		}
		ids = append(ids, st.Record().ID)
	}
	if _, err := db.IssueStatement(ctx, ids[0], mgr.ID, to.Add(2*time.Hour)); err != nil {
		t.Fatal(err)
	}
	before := map[string]scheduling.StatementRecord{}
	for _, id := range ids {
		st, err := db.Statement(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		before[id] = st.Record()
	}
	charges, err := db.IssuedChargesByInstrument(ctx, from, to)
	// [constructed] P-1 booked 1 h and 2 h at 120.00/h, no usage: 360.00 issued.
	if err != nil || charges[in.ID] != 36000 {
		t.Fatalf("issued charges %v, %v; want 36000 on %s", charges, err, in.ID)
	}

	if err := db.MigrateTo(ctx, 11); err != nil {
		t.Fatalf("down to 0011: %v", err)
	}
	for _, id := range ids {
		var n int
		var sum int64
		if err := conn.QueryRow(ctx, `SELECT count(*), coalesce(sum(amount_minor), 0)::bigint FROM statement_lines WHERE statement_id = $1`, id).Scan(&n, &sum); err != nil {
			t.Fatal(err)
		}
		if rec := before[id]; n != len(rec.Lines) || sum != rec.TotalMinor {
			t.Errorf("down: %s has %d line rows summing to %d, want %d summing to %d", id, n, sum, len(rec.Lines), rec.TotalMinor)
		}
	}
	if err := db.MigrateTo(ctx, 12); err != nil {
		t.Fatalf("up to 0012: %v", err)
	}
	for _, id := range ids {
		st, err := db.Statement(ctx, id)
		if err != nil || !reflect.DeepEqual(st.Record(), before[id]) {
			t.Errorf("after the round trip %s reads %+v, %v\nwant %+v", id, st.Record(), err, before[id])
		}
	}
	if again, err := db.IssuedChargesByInstrument(ctx, from, to); err != nil || !maps.Equal(again, charges) {
		t.Errorf("issued charges after the round trip %v, %v; want %v", again, err, charges)
	}

	// A draft's line rows edited while at 0011: the upgrade refuses, naming it.
	if err := db.MigrateTo(ctx, 11); err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(ctx, `DELETE FROM statement_lines WHERE statement_id = $1 AND line_no = 2`, ids[1]); err != nil {
		t.Fatal(err)
	}
	if err := db.MigrateTo(ctx, 12); err == nil || !strings.Contains(err.Error(), ids[1]) {
		t.Fatalf("up over a statement whose rows differ from its event: %v, want an error naming %s", err, ids[1])
	}
	var rows int
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM statement_lines`).Scan(&rows); err != nil || rows != len(before[ids[0]].Lines)+len(before[ids[1]].Lines)-1 {
		t.Errorf("after the refused upgrade statement_lines holds %d rows (%v)", rows, err)
	}
}
