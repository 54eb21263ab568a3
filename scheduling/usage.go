package scheduling

import (
	"context"
	"time"

	"beamledger"
)

// UsageSource says who recorded a usage.
type UsageSource string

// Usage sources.
const (
	SourceUser  UsageSource = "user"  // the booked user checked in or out
	SourceStaff UsageSource = "staff" // a staff member or manager did it for them
	SourceAgent UsageSource = "agent" // the instrument's computer did, with its token
)

// Usage is the actual work on a booking: check-in to check-out. Work outside the booked
// range is kept as it happened and reported as overrun, never clipped.
type Usage struct {
	ID        string      `json:"id"`
	BookingID string      `json:"booking_id"`
	StartedAt time.Time   `json:"started_at"`
	EndedAt   *time.Time  `json:"ended_at,omitempty"`
	StartedBy string      `json:"started_by"`
	EndedBy   string      `json:"ended_by,omitempty"`
	Source    UsageSource `json:"source"`
}

// EarlyCheckIn is how long before its booked start work may be checked in: time to
// load a specimen or let a holder settle, kept and counted as overrun.
const EarlyCheckIn = 2 * time.Hour

// CheckInWindow says whether work on a booking of [start, end) may be checked in at
// at: from EarlyCheckIn before the start until the end. Later than that the time was
// not used as booked (and a no-show may already be recorded); earlier, the check-in
// belongs to another booking.
func CheckInWindow(start, end, at time.Time) error {
	if at.Before(start.Add(-EarlyCheckIn)) || !at.Before(end) {
		return beamledger.RuleViolation("check_in_window",
			"work on this booking is checked in from 2 h before its start ("+start.UTC().Format(time.RFC3339)+") until its end ("+end.UTC().Format(time.RFC3339)+")",
			map[string]string{"at": "is outside the booking's check-in window"})
	}
	return nil
}

// Span is the usage's range; an open usage runs to now.
func (u Usage) Span(now time.Time) Interval {
	if u.EndedAt != nil {
		return Interval{Start: u.StartedAt, End: *u.EndedAt}
	}
	return Interval{Start: u.StartedAt, End: now}
}

// Overrun is how much of the usage lies outside the booked range [start, end): before
// the start plus after the end. An open usage counts up to now.
func (u Usage) Overrun(start, end, now time.Time) time.Duration {
	span := u.Span(now)
	over := span.End.Sub(span.Start)
	if inside, ok := span.Clip(start, end); ok {
		over -= inside.End.Sub(inside.Start)
	}
	return over
}

// UsageReport is a booking's usage as the API shows it.
type UsageReport struct {
	BookingID      string     `json:"booking_id"`
	Usages         []Usage    `json:"usages"`
	UsedMinutes    int        `json:"used_minutes"`
	OverrunMinutes int        `json:"overrun_minutes"`
	NoShowAt       *time.Time `json:"no_show_at,omitempty"`
}

// UsageStore records check-in and check-out and finds no-shows.
type UsageStore interface {
	// CheckIn opens a usage of an active booking at the given instant, and notes the
	// booked user's use of the instrument (which keeps an idle-expiring qualification
	// alive). ErrConflict when a usage is already open or the booking is cancelled.
	CheckIn(ctx context.Context, bookingID string, at time.Time, actor string, source UsageSource) (Usage, error)
	// CheckOut closes the open usage. ErrConflict when none is open or at is not after
	// its start.
	CheckOut(ctx context.Context, bookingID string, at time.Time, actor string) (Usage, error)
	// UsageReport returns a booking's usages and no-show state, judged at now.
	UsageReport(ctx context.Context, bookingID string, now time.Time) (UsageReport, error)
	// MarkNoShows records every active, non-service booking whose start plus the
	// instrument's no-show grace has passed at now without any usage, and returns
	// their ids. Running it again marks nothing twice.
	MarkNoShows(ctx context.Context, now time.Time) ([]string, error)
}
