package scheduling

import (
	"context"
	"time"
)

// NewQualification is a grant of a level on an instrument to a user.
type NewQualification struct {
	UserID               string             `json:"user_id"`
	InstrumentID         string             `json:"-"`
	Level                QualificationLevel `json:"level"`
	Reason               string             `json:"reason"`
	ExpiresAfterIdleDays *int               `json:"expires_after_idle_days"`
	GrantedBy            string             `json:"-"`
}

// QualificationFilter narrows a qualification listing.
type QualificationFilter struct {
	UserID, InstrumentID string
	IncludeRevoked       bool
}

// QualificationStore persists qualifications. A grant supersedes the user's current
// qualification on the instrument, which is revoked with the reason "superseded".
type QualificationStore interface {
	// GrantQualification stores a grant. ErrInvalid when the user or instrument is unknown.
	GrantQualification(ctx context.Context, q NewQualification, now time.Time) (Qualification, error)
	// RevokeQualification revokes one. ErrNotFound when unknown; ErrConflict when
	// already revoked.
	RevokeQualification(ctx context.Context, id, by, reason string, now time.Time) (Qualification, error)
	// Qualification returns one. ErrNotFound when unknown.
	Qualification(ctx context.Context, id string) (Qualification, error)
	// Qualifications lists qualifications, newest grant first.
	Qualifications(ctx context.Context, f QualificationFilter) ([]Qualification, error)
}

// NewBooking is a booking to store, its range already resolved to UTC instants.
type NewBooking struct {
	// ID is the id to give the booking; storage picks one when empty.
	ID                                                 string
	InstrumentID, ProjectID, UserID, StaffID, SeriesID string
	Kind                                               BookingKind
	Start, End                                         time.Time
	Note                                               string
	// Actor is who makes the booking: a user id or "agent:<token id>".
	Actor string
}

// BookingContext is what the booking rules need, read inside the booking's
// transaction so that checks and the write see the same state.
type BookingContext struct {
	Location *time.Location
	Rules    Rules
	// Qualification is the booked user's current one on the instrument (nil if none).
	Qualification *Qualification
	// PrimeUsedMinutes are the project's prime-time minutes already booked on the
	// instrument in the ISO week of the booking's start, not counting the booking itself.
	PrimeUsedMinutes int
	// Bookable is the instrument's bookable flag; Member reports whether the booked user
	// belongs to the booking's project (always false for service bookings).
	Bookable, Member bool
	// InstrumentName names the instrument in messages.
	InstrumentName string
	// HeldUntil, when set, says the range overlaps time offered to someone else from
	// the waitlist, held for them until then.
	HeldUntil *time.Time
	// FundingSplit and FundingAccounts are the shares of the booking's funding split
	// (its own, else its project's) whose accounts are not valid over all of the
	// range, with those accounts, in the split's order: empty when every account of
	// the split may be charged, ready for CheckFundingAt.
	FundingSplit    []FundingShare
	FundingAccounts []FundingAccount
}

// BookingFilter narrows a booking listing to bookings overlapping [From, To).
type BookingFilter struct {
	InstrumentID, UserID, ProjectID, SeriesID string
	From, To                                  time.Time
	IncludeCancelled                          bool
}

// BookingEvent is one attributed change to a booking.
type BookingEvent struct {
	At     time.Time `json:"at"`
	Actor  string    `json:"actor"`
	Action string    `json:"action"`
	Reason string    `json:"reason,omitempty"`
	Before *Interval `json:"before,omitempty"`
	After  *Interval `json:"after,omitempty"`
}

// BookingStore persists bookings. Overlap is refused by the database itself; the
// check functions apply the facility's rules inside the same transaction.
type BookingStore interface {
	// CreateBooking reads the rule context, calls check, and stores the booking, in one
	// transaction. A service booking cancels the active bookings it overlaps and lists
	// them as displaced. ErrConflict, naming the conflicting range, when the range
	// overlaps an active booking of the instrument or of the staff member.
	CreateBooking(ctx context.Context, nb NewBooking, now time.Time, check func(BookingContext) error) (Booking, error)
	// Booking returns one booking. ErrNotFound when unknown.
	Booking(ctx context.Context, id string) (Booking, error)
	// Bookings lists bookings overlapping the filter's range, by start.
	Bookings(ctx context.Context, f BookingFilter) ([]Booking, error)
	// MoveBooking changes a booking's range (move, shorten or extend), calling check
	// with the booking as it stands. ErrConflict as for CreateBooking; ErrConflict
	// when the booking is cancelled.
	MoveBooking(ctx context.Context, id string, start, end time.Time, actor, reason string, now time.Time,
		check func(Booking, BookingContext) error) (Booking, error)
	// CancelBooking cancels an active booking, keeping its record. ErrConflict when it is
	// already cancelled.
	CancelBooking(ctx context.Context, id, actor, reason string, now time.Time) (Booking, error)
	// BookingEvents lists a booking's history, oldest first.
	BookingEvents(ctx context.Context, id string) ([]BookingEvent, error)
}
