package scheduling

import (
	"slices"
	"time"
)

// BookingKind says what a booking is for and who may make it.
type BookingKind string

// Booking kinds, from the glossary.
const (
	// KindIndependent is time a qualified user runs the instrument alone, inside opening hours.
	KindIndependent BookingKind = "independent"
	// KindAssisted is time a staff member operates or supervises; names the assistant.
	KindAssisted BookingKind = "assisted"
	// KindTraining is time a staff member trains a user; names the trainer.
	KindTraining BookingKind = "training"
	// KindUnattended is out-of-hours or overnight time for users qualified to work alone then.
	KindUnattended BookingKind = "unattended"
	// KindService is maintenance, bake-out or downtime: made by staff, blocks everyone.
	KindService BookingKind = "service"
)

// BookingKinds lists every kind.
var BookingKinds = []BookingKind{KindIndependent, KindAssisted, KindTraining, KindUnattended, KindService}

// Valid reports whether k is one of BookingKinds.
func (k BookingKind) Valid() bool { return slices.Contains(BookingKinds, k) }

// NeedsStaff reports whether the kind names a staff member (assistant or trainer) who
// must be free for the whole range.
func (k BookingKind) NeedsStaff() bool { return k == KindAssisted || k == KindTraining }

// BookingStatus is whether a booking still holds its range.
type BookingStatus string

// Booking statuses. Bookings are never deleted: a cancelled booking keeps its record.
const (
	StatusActive    BookingStatus = "active"
	StatusCancelled BookingStatus = "cancelled"
)

// Booking is a reserved half-open range [Start, End) on one instrument for one project
// and one user. Instants are UTC.
type Booking struct {
	ID           string        `json:"id"`
	InstrumentID string        `json:"instrument_id"`
	ProjectID    string        `json:"project_id,omitempty"` // empty for service bookings
	UserID       string        `json:"user_id"`
	Kind         BookingKind   `json:"kind"`
	Start        time.Time     `json:"start"`
	End          time.Time     `json:"end"`
	StaffID      string        `json:"staff_id,omitempty"` // assistant or trainer
	SeriesID     string        `json:"series_id,omitempty"`
	Status       BookingStatus `json:"status"`
	Note         string        `json:"note,omitempty"`
	// Displaced lists, for a service booking, the bookings it cancelled so that the
	// facility can rebook those people.
	Displaced    []string   `json:"displaced,omitempty"`
	CancelledAt  *time.Time `json:"cancelled_at,omitempty"`
	CancelledBy  string     `json:"cancelled_by,omitempty"`
	CancelReason string     `json:"cancel_reason,omitempty"`
	CreatedAt    time.Time  `json:"created_at"`
	CreatedBy    string     `json:"created_by"`
	UpdatedAt    time.Time  `json:"updated_at"`
}

// Duration is the booking's elapsed length (not wall-clock length: across a DST change
// the two differ by the shift).
func (b Booking) Duration() time.Duration { return b.End.Sub(b.Start) }

// Overlaps reports whether two half-open ranges share an instant; back-to-back ranges
// do not overlap.
func Overlaps(aStart, aEnd, bStart, bEnd time.Time) bool {
	return aStart.Before(bEnd) && bStart.Before(aEnd)
}
