package postgres_test

import (
	"context"
	"errors"
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
	p := mustCreateProject(t, db, "P-1", pi.ID)
	acct, err := db.SaveFundingAccount(ctx, scheduling.FundingAccount{ProjectID: p.ID, Code: "G-1"}, mgr.ID, t0)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.SetProjectFunding(ctx, p.ID, []scheduling.FundingShare{{AccountID: acct.ID, BasisPoints: 10000}}, mgr.ID, t0); err != nil {
		t.Fatal(err)
	}
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
	for _, q := range []string{
		`UPDATE statements SET total_minor = 1 WHERE id = $1`,
		`DELETE FROM statements WHERE id = $1`,
		`UPDATE statement_lines SET amount_minor = 1 WHERE statement_id = $1`,
		`DELETE FROM statement_lines WHERE statement_id = $1`,
		`INSERT INTO statement_lines (statement_id, line_no, component, rule, minutes, hourly_rate_minor, amount_minor, allocations)
		 VALUES ($1, 99, 'adjustment', 'manager_adjustment', 0, 0, -100, '[]')`,
	} {
		_, err := conn.Exec(ctx, q, id)
		var pgErr *pgconn.PgError
		if !errors.As(err, &pgErr) || pgErr.Code != "23001" { // restrict_violation
			t.Errorf("%s: %v, want restrict_violation", q, err)
		}
	}
	if _, _, err := db.ComputeStatement(ctx, p.ID, from, from.AddDate(0, 1, 0), mgr.ID, t0); !errors.Is(err, beamledger.ErrConflict) {
		t.Errorf("recompute of an issued statement: %v, want conflict", err)
	}
	evs, err := db.EventsFor(ctx, provenance.EntityStatement, id)
	if err != nil || len(evs) != 2 || evs[0].Action != provenance.ActionCreate || evs[1].Action != provenance.ActionIssue {
		t.Errorf("statement ledger events %v %v, want create then issue", evs, err)
	}
	// Shares of a split must sum to 100 %, checked by the database at commit.
	_, err = conn.Exec(ctx, `UPDATE project_funding SET basis_points = 9000 WHERE project_id = $1`, p.ID)
	var pgErr *pgconn.PgError
	if !errors.As(err, &pgErr) || pgErr.Code != "23514" {
		t.Errorf("split of 90 %%: %v, want check_violation", err)
	}
}
