package server

import (
	"context"
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/scheduling"
)

// handleWaitlistJoin asks for a range that is taken; when it frees up the entry is
// offered, and booked if accepted within the offer window.
func (s *Server) handleWaitlistJoin(c echo.Context) error {
	var in bookingInput
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx := c.Request().Context()
	me := principal(ctx)
	if in.Kind == scheduling.KindService {
		return beamledger.InvalidField("kind", "service time is booked, not waited for")
	}
	start, end, _, err := s.parseRange(ctx, in.Start, in.End)
	if err != nil {
		return err
	}
	if !end.After(start) {
		return beamledger.InvalidField("end", "must be after start")
	}
	nb, err := s.newBooking(ctx, me, in, start, end)
	if err != nil {
		return err
	}
	// Refused here rather than when the offer is accepted: a booking for someone
	// outside the project could never be made from it.
	p, err := s.visibleProject(ctx, nb.ProjectID)
	if err != nil {
		return err
	}
	if !p.HasMember(nb.UserID) {
		return beamledger.InvalidField("user_id", "is not a member of the project")
	}
	e, err := s.store.JoinWaitlist(ctx, scheduling.WaitlistEntry{InstrumentID: nb.InstrumentID, ProjectID: nb.ProjectID, UserID: nb.UserID,
		Kind: nb.Kind, StaffID: nb.StaffID, Start: start, End: end}, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, e)
}

func (s *Server) handleWaitlistList(c echo.Context) error {
	ctx := c.Request().Context()
	me := principal(ctx)
	f := scheduling.WaitlistFilter{InstrumentID: c.QueryParam("instrument_id"), IncludeClosed: c.QueryParam("include_closed") == "true"}
	if !me.CanReadEverything() {
		f.UserID = me.UserID
	}
	es, err := s.store.WaitlistEntries(ctx, f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(es))
}

// ownWaitlistEntry loads an entry the caller may act on: their own, or any for staff
// and managers; others' are "not found".
func (s *Server) ownWaitlistEntry(ctx context.Context, id string) (scheduling.WaitlistEntry, error) {
	e, err := s.store.WaitlistEntry(ctx, id)
	if err != nil {
		return e, err
	}
	if me := principal(ctx); !me.FacilityWide() && e.UserID != me.UserID {
		return scheduling.WaitlistEntry{}, beamledger.NotFound("waitlist entry")
	}
	return e, nil
}

func (s *Server) handleWaitlistWithdraw(c echo.Context) error {
	ctx := c.Request().Context()
	e, err := s.ownWaitlistEntry(ctx, c.Param("entry_id"))
	if err != nil {
		return err
	}
	out, err := s.store.WithdrawWaitlistEntry(ctx, e.ID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}

type offerAccepted struct {
	Entry   scheduling.WaitlistEntry `json:"entry"`
	Booking scheduling.Booking       `json:"booking"`
}

// handleWaitlistAccept books an offered entry's range, under the same rules as any
// booking made now.
func (s *Server) handleWaitlistAccept(c echo.Context) error {
	ctx := c.Request().Context()
	me := principal(ctx)
	e, err := s.ownWaitlistEntry(ctx, c.Param("entry_id"))
	if err != nil {
		return err
	}
	now := s.now()
	nb := scheduling.NewBooking{InstrumentID: e.InstrumentID, ProjectID: e.ProjectID, UserID: e.UserID, StaffID: e.StaffID,
		Kind: e.Kind, Start: e.Start, End: e.End, Actor: me.ID()}
	entry, b, err := s.store.AcceptOffer(ctx, e.ID, me.ID(), now, func(bc scheduling.BookingContext) error {
		return checkNewBooking(me, nb, bc, now)
	})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, offerAccepted{Entry: entry, Booking: b})
}
