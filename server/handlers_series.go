package server

import (
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/scheduling"
)

// maxSeriesInstances bounds one series: a year of weekly sessions, twice over.
const maxSeriesInstances = 104

type seriesInput struct {
	InstrumentID    string                 `json:"instrument_id"`
	ProjectID       string                 `json:"project_id"`
	UserID          string                 `json:"user_id"`
	Kind            scheduling.BookingKind `json:"kind"`
	StaffID         string                 `json:"staff_id"`
	Note            string                 `json:"note"`
	RRule           string                 `json:"rrule"`
	Start           string                 `json:"start"`
	DurationMinutes int                    `json:"duration_minutes"`
	BookFree        bool                   `json:"book_free"`
}

// handleSeriesCreate expands an RRULE in the facility zone (instances on local times
// that do not exist are dropped, RFC 5545 §3.3.10) and books every instance in one
// transaction, or, with book_free, the free ones.
func (s *Server) handleSeriesCreate(c echo.Context) error {
	var in seriesInput
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx := c.Request().Context()
	me := principal(ctx)
	f, err := s.store.Facility(ctx)
	if err != nil {
		return err
	}
	loc, err := time.LoadLocation(f.TimeZone)
	if err != nil {
		return err
	}
	wall, err := scheduling.ParseWall(in.Start)
	if err != nil {
		return beamledger.InvalidField("start", "must be a local date-time in the facility zone, such as 2026-12-08T09:00")
	}
	if in.DurationMinutes < 1 || in.DurationMinutes > 24*60 {
		return beamledger.InvalidField("duration_minutes", "must be between 1 and 1440")
	}
	now := s.now()
	occs, err := scheduling.Expand(scheduling.SeriesSpec{RRule: in.RRule, Start: wall, Duration: time.Duration(in.DurationMinutes) * time.Minute},
		loc, now.AddDate(1, 0, 0), maxSeriesInstances)
	if err != nil {
		return err
	}
	if len(occs) == 0 {
		return beamledger.InvalidField("rrule", "produces no bookings")
	}
	tmpl, err := s.newBooking(ctx, me, bookingInput{InstrumentID: in.InstrumentID, ProjectID: in.ProjectID, UserID: in.UserID,
		Kind: in.Kind, StaffID: in.StaffID, Note: in.Note}, occs[0].Start, occs[0].End)
	if err != nil {
		return err
	}
	// A researcher learns nothing of projects that are not theirs, not even whether
	// they exist (the series row is written before its bookings are checked).
	if !me.FacilityWide() && tmpl.Kind != scheduling.KindService {
		if _, err := s.visibleProject(ctx, tmpl.ProjectID); err != nil {
			return err
		}
	}
	ns := scheduling.NewSeries{Template: tmpl, RRule: strings.TrimPrefix(strings.ToUpper(strings.TrimSpace(in.RRule)), "RRULE:"),
		Start: wall, TimeZone: f.TimeZone, Duration: time.Duration(in.DurationMinutes) * time.Minute, Occurrences: occs, BookFree: in.BookFree}
	res, err := s.store.CreateSeries(ctx, ns, now, func(o scheduling.Occurrence, bc scheduling.BookingContext) error {
		nb := tmpl
		nb.Start, nb.End = o.Start, o.End
		if err := checkNewBooking(me, nb, bc, now); err != nil {
			return err
		}
		// As for a single booking, every instance's charges need a valid account (the
		// caps are judged by storage, instance after instance in this transaction); an
		// instance refused is reported with the funding rule it breaks.
		return scheduling.CheckFundingAt(bc.FundingSplit, bc.FundingAccounts, nb.Start, nb.End)
	})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, res)
}

func (s *Server) handleSeriesGet(c echo.Context) error {
	ctx := c.Request().Context()
	sr, err := s.visibleSeries(c)
	if err != nil {
		return err
	}
	bs, err := s.store.Bookings(ctx, scheduling.BookingFilter{SeriesID: sr.ID, IncludeCancelled: true})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, seriesAnswer{Series: sr, Bookings: bs})
}

type seriesAnswer struct {
	Series   scheduling.Series    `json:"series"`
	Bookings []scheduling.Booking `json:"bookings"`
}

// visibleSeries loads a series the caller may see, like its bookings.
func (s *Server) visibleSeries(c echo.Context) (scheduling.Series, error) {
	ctx := c.Request().Context()
	sr, err := s.store.Series(ctx, c.Param("series_id"))
	if err != nil {
		return sr, err
	}
	if !s.mayReadBooked(ctx, sr.UserID, sr.ProjectID, sr.Kind) {
		return scheduling.Series{}, beamledger.NotFound("series")
	}
	return sr, nil
}

type seriesCancel struct {
	Reason string `json:"reason"`
	// From cancels the instances starting at or after this instant; empty means now.
	From string `json:"from"`
}

// handleSeriesCancel cancels the rest of a series: every active instance from a given
// instant on. One instance alone is cancelled as any booking.
func (s *Server) handleSeriesCancel(c echo.Context) error {
	var in seriesCancel
	if err := bind(c, &in); err != nil {
		return err
	}
	r := reasonInput{Reason: in.Reason}
	if err := r.required(); err != nil {
		return err
	}
	ctx := c.Request().Context()
	me := principal(ctx)
	sr, err := s.visibleSeries(c)
	if err != nil {
		return err
	}
	if !me.FacilityWide() && sr.UserID != me.UserID {
		return beamledger.Forbidden("only the booked user, staff or a manager cancels this series")
	}
	from := s.now()
	if in.From != "" {
		if from, err = time.Parse(time.RFC3339, in.From); err != nil {
			return beamledger.InvalidField("from", "must be an RFC 3339 instant with an offset")
		}
	}
	bs, err := s.store.CancelSeriesFrom(ctx, sr.ID, from, me.ID(), r.Reason, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(bs))
}
