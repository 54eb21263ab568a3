package scheduling

import (
	"context"
	"time"
)

// Series is a recurring set of bookings described by an RFC 5545 RRULE in the
// facility's zone. Its bookings are ordinary bookings that carry the series id.
type Series struct {
	ID              string      `json:"id"`
	InstrumentID    string      `json:"instrument_id"`
	ProjectID       string      `json:"project_id,omitempty"`
	UserID          string      `json:"user_id"`
	Kind            BookingKind `json:"kind"`
	RRule           string      `json:"rrule"`
	Start           Wall        `json:"start"`
	TimeZone        string      `json:"time_zone"`
	DurationMinutes int         `json:"duration_minutes"`
	CreatedBy       string      `json:"created_by"`
	CreatedAt       time.Time   `json:"created_at"`
}

// SeriesConflict is one instance of a series that could not be booked, and why: the
// range it overlaps, or the rule it breaks.
type SeriesConflict struct {
	Start   time.Time `json:"start"`
	End     time.Time `json:"end"`
	Message string    `json:"message"`
	Rule    string    `json:"rule,omitempty"`
}

// SeriesResult is what creating a series did.
type SeriesResult struct {
	Series    Series           `json:"series"`
	Booked    []Booking        `json:"booked"`
	Conflicts []SeriesConflict `json:"conflicts"`
}

// NewSeries is a series to store with its expanded occurrences.
type NewSeries struct {
	Template    NewBooking // instrument, project, user, staff, kind, note, actor; no range
	RRule       string
	Start       Wall
	TimeZone    string
	Duration    time.Duration
	Occurrences []Occurrence
	// BookFree books the free instances and reports the rest; otherwise any conflict
	// books nothing.
	BookFree bool
}

// SeriesStore persists series.
type SeriesStore interface {
	// CreateSeries books every occurrence in one transaction, calling check for each.
	// Without BookFree, one refused occurrence books nothing, and the result lists every
	// refused occurrence with ErrConflict. With BookFree, the refused ones are listed
	// and the others booked.
	CreateSeries(ctx context.Context, ns NewSeries, now time.Time, check func(Occurrence, BookingContext) error) (SeriesResult, error)
	// Series returns one series. ErrNotFound when unknown.
	Series(ctx context.Context, id string) (Series, error)
	// CancelSeriesFrom cancels the series' active bookings starting at or after from,
	// returning them.
	CancelSeriesFrom(ctx context.Context, id string, from time.Time, actor, reason string, now time.Time) ([]Booking, error)
}
