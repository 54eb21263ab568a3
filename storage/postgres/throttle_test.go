package postgres_test

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// wantLocked fails unless key is locked out at now with exactly retryAfter to wait.
func wantLocked(t *testing.T, db *postgres.DB, key string, rule accounts.ThrottleRule, now time.Time, retryAfter time.Duration) {
	t.Helper()
	err := db.CheckLogin(context.Background(), key, rule, now)
	wantKind(t, err, beamledger.ErrRateLimited)
	if e := domainError(t, err); e.RetryAfter != retryAfter {
		t.Errorf("RetryAfter = %v, want %v", e.RetryAfter, retryAfter)
	}
}

func wantOpen(t *testing.T, db *postgres.DB, key string, rule accounts.ThrottleRule, now time.Time) {
	t.Helper()
	if err := db.CheckLogin(context.Background(), key, rule, now); err != nil {
		t.Fatalf("CheckLogin(%s) at %v = %v, want nil", key, now, err)
	}
}

func mustFail(t *testing.T, db *postgres.DB, key string, rule accounts.ThrottleRule, now time.Time) {
	t.Helper()
	if err := db.RecordLoginFailure(context.Background(), key, rule, now); err != nil {
		t.Fatalf("RecordLoginFailure: %v", err)
	}
}

func TestLoginThrottleLockout(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	rule := accounts.ThrottleRule{MaxFailures: 3, Window: 15 * time.Minute}
	const key = "account:ann@example.org"

	wantOpen(t, db, key, rule, t0)
	mustFail(t, db, key, rule, t0)
	mustFail(t, db, key, rule, t0.Add(time.Minute))
	wantOpen(t, db, key, rule, t0.Add(2*time.Minute))
	mustFail(t, db, key, rule, t0.Add(3*time.Minute))

	// Locked until the window that began at the first failure ends.
	wantLocked(t, db, key, rule, t0.Add(4*time.Minute), 11*time.Minute)
	wantLocked(t, db, key, rule, t0.Add(15*time.Minute-time.Second), time.Second)
	// Other keys are counted apart.
	wantOpen(t, db, "address:192.0.2.7", rule, t0.Add(4*time.Minute))
	wantOpen(t, db, "account:bea@example.org", rule, t0.Add(4*time.Minute))
	// A laxer rule over the same count lets the key through.
	wantOpen(t, db, key, accounts.ThrottleRule{MaxFailures: 4, Window: 15 * time.Minute}, t0.Add(4*time.Minute))

	// When the window ends the lock lifts, though the count is still in the table.
	wantOpen(t, db, key, rule, t0.Add(15*time.Minute))
	// The next failure starts a new window with a count of one...
	mustFail(t, db, key, rule, t0.Add(20*time.Minute))
	wantOpen(t, db, key, rule, t0.Add(20*time.Minute))
	mustFail(t, db, key, rule, t0.Add(21*time.Minute))
	wantOpen(t, db, key, rule, t0.Add(21*time.Minute))
	// ...and the lock that follows runs to the new window's end.
	mustFail(t, db, key, rule, t0.Add(22*time.Minute))
	wantLocked(t, db, key, rule, t0.Add(22*time.Minute), 13*time.Minute)
}

// A failure exactly one window after the window began opens a new window.
func TestLoginThrottleWindowBoundary(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	rule := accounts.ThrottleRule{MaxFailures: 2, Window: time.Minute}
	const key = "account:ann@example.org"
	mustFail(t, db, key, rule, t0)
	mustFail(t, db, key, rule, t0.Add(time.Minute))
	wantOpen(t, db, key, rule, t0.Add(time.Minute))
	mustFail(t, db, key, rule, t0.Add(time.Minute+59*time.Second))
	wantLocked(t, db, key, rule, t0.Add(time.Minute+59*time.Second), time.Second)
}

func TestResetLogin(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	rule := accounts.ThrottleRule{MaxFailures: 2, Window: time.Hour}
	for _, key := range []string{"account:ann@example.org", "address:192.0.2.7"} {
		mustFail(t, db, key, rule, t0)
		mustFail(t, db, key, rule, t0)
		wantLocked(t, db, key, rule, t0, time.Hour)
	}
	if err := db.ResetLogin(ctx, "account:ann@example.org"); err != nil {
		t.Fatal(err)
	}
	wantOpen(t, db, "account:ann@example.org", rule, t0)
	wantLocked(t, db, "address:192.0.2.7", rule, t0, time.Hour)
	// After a reset the count starts from nothing.
	mustFail(t, db, "account:ann@example.org", rule, t0)
	wantOpen(t, db, "account:ann@example.org", rule, t0)
	if err := db.ResetLogin(ctx, "account:never-seen@example.org"); err != nil {
		t.Errorf("ResetLogin of an unknown key = %v, want nil", err)
	}
}

// Failures arrive from many processes at once; none may be lost.
func TestRecordLoginFailureConcurrently(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	const n = 20
	const key = "address:192.0.2.7"
	rule := accounts.ThrottleRule{MaxFailures: n, Window: time.Hour}
	var wg sync.WaitGroup
	start := make(chan struct{})
	errs := make([]error, n)
	for i := range n {
		wg.Go(func() {
			<-start
			errs[i] = db.RecordLoginFailure(context.Background(), key, rule, t0)
		})
	}
	close(start)
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		t.Fatal(err)
	}
	// Locked at 20 but not at 21: the count is exactly 20.
	wantLocked(t, db, key, rule, t0, time.Hour)
	wantOpen(t, db, key, accounts.ThrottleRule{MaxFailures: n + 1, Window: time.Hour}, t0)
}
