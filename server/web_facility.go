package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/web"
)

// handleInstrumentsPage shows the instruments' capabilities and booking rules (the
// script reads them from the API); managers also add instruments, open or close them
// to bookings, and change the facility's rules and an instrument's own.
func (s *Server) handleInstrumentsPage(c echo.Context, me accounts.Principal, pg web.Page) error {
	pg.Title, pg.Nav, pg.Script = "Instruments", "instruments", "instruments.js"
	d := web.InstrumentsData{Page: pg, Manage: me.Role == accounts.RoleManager}
	for _, k := range scheduling.InstrumentKinds {
		d.Kinds = append(d.Kinds, string(k))
	}
	for _, k := range []scheduling.Corrector{scheduling.CorrectorNone, scheduling.CorrectorProbe, scheduling.CorrectorImage, scheduling.CorrectorProbeAndImage} {
		d.Correctors = append(d.Correctors, string(k))
	}
	for _, k := range scheduling.DetectorKinds {
		d.DetectorKinds = append(d.DetectorKinds, string(k))
	}
	return s.render(c, http.StatusOK, "instruments", "layout", d)
}
