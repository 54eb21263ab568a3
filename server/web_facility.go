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

// handlePeoplePage lists the people and projects (the script reads them from the
// API); managers add people and projects and change members. Staff and managers also
// see the instruments' agent tokens, which managers issue and revoke.
func (s *Server) handlePeoplePage(c echo.Context, me accounts.Principal, pg web.Page) error {
	pg.Title, pg.Nav, pg.Script = "People and projects", "people", "people.js"
	d := web.PeopleData{Page: pg, Manage: me.Role == accounts.RoleManager, Staff: me.FacilityWide()}
	for _, r := range accounts.Roles {
		d.Roles = append(d.Roles, string(r))
	}
	for _, r := range accounts.RateClasses {
		d.RateClasses = append(d.RateClasses, string(r))
	}
	for _, sc := range accounts.Scopes {
		d.Scopes = append(d.Scopes, string(sc))
	}
	if d.Staff {
		ins, err := s.store.Instruments(c.Request().Context())
		if err != nil {
			return err
		}
		for _, in := range ins {
			d.Instruments = append(d.Instruments, web.Option{Value: in.ID, Label: in.Code + " — " + in.Name})
		}
	}
	return s.render(c, http.StatusOK, "people", "layout", d)
}
