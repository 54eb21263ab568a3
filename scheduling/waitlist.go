package scheduling

import (
	"context"
	"time"
)

// WaitlistStatus is where a waitlist entry stands.
type WaitlistStatus string

// Waitlist statuses. An entry waits until its range frees up, is then offered for a
// limited time, and is booked when accepted, or lapses, or is withdrawn.
const (
	WaitlistWaiting   WaitlistStatus = "waiting"
	WaitlistOffered   WaitlistStatus = "offered"
	WaitlistBooked    WaitlistStatus = "booked"
	WaitlistLapsed    WaitlistStatus = "lapsed"
	WaitlistWithdrawn WaitlistStatus = "withdrawn"
)

// WaitlistEntry is a request for a range that was taken when asked for.
type WaitlistEntry struct {
	ID             string         `json:"id"`
	InstrumentID   string         `json:"instrument_id"`
	ProjectID      string         `json:"project_id"`
	UserID         string         `json:"user_id"`
	Kind           BookingKind    `json:"kind"`
	StaffID        string         `json:"staff_id,omitempty"`
	Start          time.Time      `json:"start"`
	End            time.Time      `json:"end"`
	Status         WaitlistStatus `json:"status"`
	OfferedAt      *time.Time     `json:"offered_at,omitempty"`
	OfferExpiresAt *time.Time     `json:"offer_expires_at,omitempty"`
	BookingID      string         `json:"booking_id,omitempty"`
	CreatedAt      time.Time      `json:"created_at"`
	UpdatedAt      time.Time      `json:"updated_at"`
}

// WaitlistFilter narrows a waitlist listing.
type WaitlistFilter struct {
	InstrumentID, UserID string
	// IncludeClosed keeps booked, lapsed and withdrawn entries too.
	IncludeClosed bool
}

// WaitlistStore persists the waitlist. When a booking is cancelled, moved or shortened,
// storage offers the freed time, in the same transaction, to the oldest waiting entry
// whose whole range is now free; an offer not accepted within the offer window lapses
// and the time goes to the next entry.
type WaitlistStore interface {
	// JoinWaitlist adds an entry. ErrConflict when the range is free (book it instead).
	JoinWaitlist(ctx context.Context, e WaitlistEntry, now time.Time) (WaitlistEntry, error)
	// WaitlistEntry returns one entry. ErrNotFound when unknown.
	WaitlistEntry(ctx context.Context, id string) (WaitlistEntry, error)
	// WaitlistEntries lists entries, oldest first.
	WaitlistEntries(ctx context.Context, f WaitlistFilter) ([]WaitlistEntry, error)
	// WithdrawWaitlistEntry withdraws a waiting or offered entry. ErrConflict when it is
	// already closed.
	WithdrawWaitlistEntry(ctx context.Context, id string, now time.Time) (WaitlistEntry, error)
	// AcceptOffer books an offered entry's range, calling check with the rule context.
	// ErrConflict when the entry is not on offer or its offer has lapsed.
	AcceptOffer(ctx context.Context, id, actor string, now time.Time, check func(BookingContext) error) (WaitlistEntry, Booking, error)
	// LapseOffers closes offers whose window has passed at now and offers their time
	// to the next entries, returning the ids of the lapsed entries.
	LapseOffers(ctx context.Context, now time.Time) ([]string, error)
}
