package postgres

import (
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"beamledger/scheduling"
)

// TestSortBillable puts random bookings (many sharing a start, so the id decides)
// in start-then-id order, each booking whole and its usages by start, and checks
// the result against a plain sort of a copy.
func TestSortBillable(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	base := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	for _, n := range []int{0, 1, 2, 3, 17, 500} {
		bs := make([]scheduling.BillableBooking, n)
		for i := range bs {
			start := base.Add(time.Duration(rng.IntN(20)) * time.Hour)
			bs[i].Booking = scheduling.Booking{ID: strconv.Itoa(rng.IntN(1000)) + "-" + strconv.Itoa(i), Start: start, End: start.Add(time.Hour)}
			bs[i].RebookedMinutes = i // tells the bookings apart after the move
			for range rng.IntN(3) {
				at := start.Add(time.Duration(rng.IntN(60)) * time.Minute)
				bs[i].Usages = append(bs[i].Usages, scheduling.Usage{StartedAt: at})
			}
		}
		want := slices.Clone(bs)
		slices.SortFunc(want, func(x, y scheduling.BillableBooking) int {
			if c := x.Booking.Start.Compare(y.Booking.Start); c != 0 {
				return c
			}
			return strings.Compare(x.Booking.ID, y.Booking.ID)
		})
		sortBillable(bs)
		for i := range bs {
			if bs[i].Booking.ID != want[i].Booking.ID || bs[i].RebookedMinutes != want[i].RebookedMinutes {
				t.Fatalf("n=%d: place %d holds %s, want %s", n, i, bs[i].Booking.ID, want[i].Booking.ID)
			}
			if !slices.IsSortedFunc(bs[i].Usages, func(u, v scheduling.Usage) int { return u.StartedAt.Compare(v.StartedAt) }) {
				t.Errorf("n=%d: usages of %s not in order", n, bs[i].Booking.ID)
			}
		}
	}
}
