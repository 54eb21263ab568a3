package postgres_test

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"beamledger"
	"beamledger/scheduling"
)

// TestBillingCapHoldsUnderConcurrentBookings: bookings on one capped account made at
// the same moment, each in its own transaction, are judged one after the other, so no
// more are made than the cap has room for.
func TestBillingCapHoldsUnderConcurrentBookings(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	from := time.Date(2031, 4, 1, 0, 0, 0, 0, time.UTC)
	mgr, pi, in := billingFacility(t, db, from)
	p := mustCreateProject(t, db, "P-1", pi.ID)
	// [constructed] 2 h at 120.00 = 240.00 a booking: the cap has room for two.
	a, err := db.SaveFundingAccount(ctx, scheduling.FundingAccount{ProjectID: p.ID, Code: "CAP-C", CapMinor: 48000}, mgr.ID, t0)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.SetProjectFunding(ctx, p.ID, []scheduling.FundingShare{{AccountID: a.ID, BasisPoints: 10000}}, mgr.ID, t0); err != nil {
		t.Fatal(err)
	}
	const n = 8 // the pool's size
	// Open the pool's connections first, so that the bookings start together rather
	// than one connection at a time.
	var warm sync.WaitGroup
	for range n {
		warm.Add(1)
		go func() {
			defer warm.Done()
			for range 5 {
				_, _ = db.FundingAccounts(ctx, p.ID)
			}
		}()
	}
	warm.Wait()
	errs := make([]error, n)
	start := make(chan struct{})
	var wg sync.WaitGroup
	for i := range n {
		wg.Add(1)
		go func() {
			defer wg.Done()
			<-start
			s := from.AddDate(0, 0, i).Add(9 * time.Hour)
			_, errs[i] = db.CreateBooking(ctx, scheduling.NewBooking{InstrumentID: in.ID, ProjectID: p.ID, UserID: pi.ID,
				Kind: scheduling.KindIndependent, Start: s, End: s.Add(2 * time.Hour), Actor: pi.ID}, t0,
				func(scheduling.BookingContext) error { return nil })
		}()
	}
	close(start)
	wg.Wait()
	made := 0
	for _, err := range errs {
		var e *beamledger.Error
		switch {
		case err == nil:
			made++
		case !errors.As(err, &e) || e.Rule != "funding_cap":
			t.Errorf("booking refused with %v, want rule funding_cap", err)
		}
	}
	if made != 2 {
		t.Errorf("%d of %d concurrent bookings made on an account with room for 2", made, n)
	}
}
