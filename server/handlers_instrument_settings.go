package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/scheduling"
)

type bookableInput struct {
	Bookable *bool `json:"bookable"`
}

// handleInstrumentBookableSet opens an instrument to bookings or closes it (for
// repair, or while it is being installed); bookings already made stay.
func (s *Server) handleInstrumentBookableSet(c echo.Context) error {
	var req bookableInput
	if err := bind(c, &req); err != nil {
		return err
	}
	if req.Bookable == nil {
		return beamledger.InvalidField("bookable", "is required: true or false")
	}
	ctx := c.Request().Context()
	in, err := s.store.SetInstrumentBookable(ctx, c.Param("instrument_id"), *req.Bookable, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, in)
}

// handleInstrumentCapabilitiesSet replaces an instrument's capabilities (name, kind,
// location, accelerating voltages, corrector, detectors). Acquisitions already
// recorded keep the conditions they were recorded with; new ones are checked against
// the new capabilities.
func (s *Server) handleInstrumentCapabilitiesSet(c echo.Context) error {
	var req scheduling.Capabilities
	if err := bind(c, &req); err != nil {
		return err
	}
	ctx := c.Request().Context()
	cur, err := s.store.Instrument(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	next, err := cur.WithCapabilities(req)
	if err != nil {
		return err
	}
	out, err := s.store.SetInstrumentCapabilities(ctx, next, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}
