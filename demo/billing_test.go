package demo_test

import (
	"context"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/demo"
	"beamledger/scheduling"
	"beamledger/storage/postgres/pgtest"
)

// TestLoadBilling loads the demo facility on a Wednesday and checks its cost recovery:
// rates from the calculator, an issued statement for every project last month with
// the charges of its sessions, a draft for this month, and a second load adding nothing.
func TestLoadBilling(t *testing.T) {
	db := pgtest.Open(t)
	ctx := context.Background()
	hasher := accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), 1)
	now := time.Date(2026, 12, 9, 11, 0, 0, 0, time.UTC)
	if _, err := demo.Load(ctx, db, hasher, []byte("demo test secret"), now); err != nil {
		t.Fatal(err)
	}
	if err := demo.LoadWeek(ctx, db, db, now); err != nil {
		t.Fatal(err)
	}
	if err := demo.LoadAcquisitions(ctx, db, db, db, now); err != nil {
		t.Fatal(err)
	}
	for range 2 {
		if err := demo.LoadBilling(ctx, db, db, db, now); err != nil {
			t.Fatal(err)
		}
	}
	schedules, err := db.RateSchedules(ctx, "")
	if err != nil || len(schedules) != 3 {
		t.Fatalf("rate schedules %d %v, want one per costed instrument", len(schedules), err)
	}
	projects, err := db.Projects(ctx, accounts.ProjectFilter{})
	if err != nil {
		t.Fatal(err)
	}
	var charged int64
	for _, p := range projects {
		sts, err := db.Statements(ctx, p.ID)
		if err != nil || len(sts) != 2 {
			t.Fatalf("project %s: %d statements %v, want this month's draft and last month's issued", p.Code, len(sts), err)
		}
		if sts[0].Status != scheduling.StatementDraft || sts[1].Status != scheduling.StatementIssued {
			t.Errorf("project %s: statuses %s, %s", p.Code, sts[0].Status, sts[1].Status)
		}
		charged += sts[1].TotalMinor
	}
	if charged <= 0 {
		t.Errorf("last month charged %d in all", charged)
	}
}
