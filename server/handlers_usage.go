package server

import (
	"context"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

// usageBooking loads a booking whose usage the caller may record: the booked user,
// staff or a manager, or an agent of the booking's instrument holding usage:write.
func (s *Server) usageBooking(ctx context.Context, id string) (scheduling.Booking, scheduling.UsageSource, error) {
	me := principal(ctx)
	if me.IsAgent() {
		b, err := s.store.Booking(ctx, id)
		if err != nil || b.InstrumentID != me.InstrumentID {
			return scheduling.Booking{}, "", beamledger.NotFound("booking")
		}
		return b, scheduling.SourceAgent, nil
	}
	b, err := s.changeableBooking(ctx, id)
	if err != nil {
		return b, "", err
	}
	if b.UserID == me.UserID {
		return b, scheduling.SourceUser, nil
	}
	return b, scheduling.SourceStaff, nil
}

type usageInput struct {
	// At is when work started or ended; empty means now. It may lie up to a day in the
	// past (an agent catching up after a network outage) and never in the future.
	At string `json:"at"`
}

func (s *Server) usageInstant(in usageInput) (time.Time, error) {
	now := s.now()
	if in.At == "" {
		return now, nil
	}
	at, err := time.Parse(time.RFC3339, in.At)
	if err != nil {
		return at, beamledger.InvalidField("at", "must be an RFC 3339 instant with an offset")
	}
	if at.After(now.Add(time.Minute)) || at.Before(now.Add(-24*time.Hour)) {
		return at, beamledger.InvalidField("at", "must lie within the last 24 hours and not in the future")
	}
	return at.UTC(), nil
}

func (s *Server) handleCheckIn(c echo.Context) error {
	return s.recordUsage(c, true)
}

func (s *Server) handleCheckOut(c echo.Context) error {
	return s.recordUsage(c, false)
}

func (s *Server) recordUsage(c echo.Context, in bool) error {
	var req usageInput
	if c.Request().ContentLength != 0 {
		if err := bind(c, &req); err != nil {
			return err
		}
	}
	at, err := s.usageInstant(req)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	b, source, err := s.usageBooking(ctx, c.Param("booking_id"))
	if err != nil {
		return err
	}
	actor := principal(ctx).ID()
	var u scheduling.Usage
	if in {
		// A cancelled booking is refused as a conflict by the store, window or not.
		if b.Status == scheduling.StatusActive {
			if err := scheduling.CheckInWindow(b.Start, b.End, at); err != nil {
				return err
			}
		}
		u, err = s.store.CheckIn(ctx, b.ID, at, actor, source)
	} else {
		u, err = s.store.CheckOut(ctx, b.ID, at, actor)
	}
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, u)
}

func (s *Server) handleUsageReport(c echo.Context) error {
	ctx := c.Request().Context()
	id := c.Param("booking_id")
	var err error
	if me := principal(ctx); me.IsAgent() {
		_, _, err = s.usageBooking(ctx, id)
	} else {
		_, err = s.visibleBooking(ctx, id)
	}
	if err != nil {
		return err
	}
	r, err := s.store.UsageReport(ctx, id, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, r)
}

// usageRule admits booking users, staff and managers, and agents recording usage.
func usageRule() rule {
	return usersOrAgent(accounts.ScopeUsageWrite, accounts.RoleManager, accounts.RoleStaff, accounts.RoleResearcher)
}
