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
