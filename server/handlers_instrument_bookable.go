package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
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
	in, err := s.store.SetInstrumentBookable(c.Request().Context(), c.Param("instrument_id"), *req.Bookable)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, in)
}
