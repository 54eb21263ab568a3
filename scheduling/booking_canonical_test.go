package scheduling

import (
	"math/rand/v2"
	"testing"
	"time"
)

// randomBooking fills every member, each optional one both present and absent across
// calls, with strings that need escaping and instants with and without fractions.
func randomBooking(r *rand.Rand) Booking {
	str := func() string { return awkward[r.IntN(len(awkward))] }
	maybe := func() string {
		if r.IntN(2) == 0 {
			return ""
		}
		return str()
	}
	instant := func() time.Time {
		return time.Date(2000+r.IntN(60), time.Month(1+r.IntN(12)), 1+r.IntN(28), r.IntN(24), r.IntN(60), r.IntN(60),
			[]int{0, 500_000_000, r.IntN(1_000_000_000)}[r.IntN(3)], time.UTC)
	}
	b := Booking{ID: str(), InstrumentID: str(), ProjectID: maybe(), UserID: str(), Kind: BookingKind(str()),
		Start: instant(), End: instant(), StaffID: maybe(), SeriesID: maybe(), Status: BookingStatus(str()), Note: maybe(),
		CancelledBy: maybe(), CancelReason: maybe(), CreatedAt: instant(), CreatedBy: str(), UpdatedAt: instant()}
	switch r.IntN(3) {
	case 0:
		b.Displaced = []string{}
	case 1:
		for range 1 + r.IntN(3) {
			b.Displaced = append(b.Displaced, str())
		}
	}
	if r.IntN(2) == 0 {
		at := instant()
		b.CancelledAt = &at
	}
	return b
}

// TestBookingCanonicalJSONIsTheGeneralWays holds the booking's own canonical writer
// to the general way, byte for byte, and checks that what it cannot write exactly
// it declines (the ledger then takes the general way).
func TestBookingCanonicalJSONIsTheGeneralWays(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 5))
	for i := range 5000 {
		b := randomBooking(r)
		got, err := b.AppendCanonicalJSON(nil)
		if err != nil {
			t.Fatalf("booking %d: %v", i, err)
		}
		// [computed] github.com/gowebpki/jcs (RFC 8785) over encoding/json's output.
		if want := generalCanonical(t, b); string(got) != string(want) {
			t.Fatalf("booking %d:\n got %s\nwant %s", i, got, want)
		}
	}
	// A booking as the store makes one, after a prefix.
	at := time.Date(2031, 3, 4, 9, 0, 0, 0, time.UTC)
	b := Booking{ID: "b", InstrumentID: "i", ProjectID: "p", UserID: "u", Kind: KindIndependent, Start: at, End: at.Add(time.Hour),
		Status: StatusActive, CreatedAt: at, CreatedBy: "u", UpdatedAt: at}
	got, err := b.AppendCanonicalJSON([]byte("prefix:"))
	if err != nil || string(got) != "prefix:"+string(generalCanonical(t, b)) {
		t.Fatalf("appending after a prefix: %s, %v", got, err)
	}
	for name, bad := range map[string]func(*Booking){
		"not UTF-8":      func(b *Booking) { b.Note = "\xff" },
		"offset not UTC": func(b *Booking) { b.Start = b.Start.In(time.FixedZone("CET", 3600)) },
		"year 10000":     func(b *Booking) { b.End = time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC) },
	} {
		c := b
		bad(&c)
		if _, err := c.AppendCanonicalJSON(nil); err == nil {
			t.Errorf("%s: written, want declined", name)
		}
	}
}
