package server

import (
	"net/http"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/scheduling"
)

// rulesAnswer shows a set of booking rules: the departures stored at this level and
// the rules in force once every level is applied.
type rulesAnswer struct {
	Override  scheduling.RulesOverride `json:"override"`
	Effective scheduling.Rules         `json:"effective"`
}

func (s *Server) handleFacilityRulesGet(c echo.Context) error {
	o, err := s.store.FacilityRules(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, rulesAnswer{Override: o, Effective: scheduling.DefaultRules().With(o)})
}

// handleFacilityRulesSet replaces the facility's departures from the default rules;
// the rules in force on every instrument must still be valid.
func (s *Server) handleFacilityRulesSet(c echo.Context) error {
	var o scheduling.RulesOverride
	if err := bind(c, &o); err != nil {
		return err
	}
	ctx := c.Request().Context()
	eff := scheduling.DefaultRules().With(o)
	if err := eff.Validate(); err != nil {
		return err
	}
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return err
	}
	for _, in := range ins {
		io, err := s.store.InstrumentRules(ctx, in.ID)
		if err != nil {
			return err
		}
		if err := eff.With(io).Validate(); err != nil {
			return beamledger.Invalid("with these rules "+in.Code+"'s own rules would be invalid: "+err.Error(), nil)
		}
	}
	if err := s.store.SetFacilityRules(ctx, o); err != nil {
		return err
	}
	return c.JSON(http.StatusOK, rulesAnswer{Override: o, Effective: eff})
}

func (s *Server) handleInstrumentRulesGet(c echo.Context) error {
	ctx := c.Request().Context()
	if me := principal(ctx); me.IsAgent() && me.InstrumentID != c.Param("instrument_id") {
		return beamledger.NotFound("instrument")
	}
	fo, err := s.store.FacilityRules(ctx)
	if err != nil {
		return err
	}
	io, err := s.store.InstrumentRules(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, rulesAnswer{Override: io, Effective: scheduling.DefaultRules().With(fo).With(io)})
}

func (s *Server) handleInstrumentRulesSet(c echo.Context) error {
	var io scheduling.RulesOverride
	if err := bind(c, &io); err != nil {
		return err
	}
	ctx := c.Request().Context()
	fo, err := s.store.FacilityRules(ctx)
	if err != nil {
		return err
	}
	eff := scheduling.DefaultRules().With(fo).With(io)
	if err := eff.Validate(); err != nil {
		return err
	}
	if err := s.store.SetInstrumentRules(ctx, c.Param("instrument_id"), io); err != nil {
		return err
	}
	return c.JSON(http.StatusOK, rulesAnswer{Override: io, Effective: eff})
}

func (s *Server) handleQuotaSet(c echo.Context) error {
	var q scheduling.Quota
	if err := bind(c, &q); err != nil {
		return err
	}
	if err := q.Validate(); err != nil {
		return err
	}
	out, err := s.store.SetQuota(c.Request().Context(), q)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}

func (s *Server) handleQuotaList(c echo.Context) error {
	ctx := c.Request().Context()
	projectID := c.QueryParam("project_id")
	me := principal(ctx)
	if !me.CanReadEverything() {
		if projectID == "" {
			return beamledger.InvalidField("project_id", "is required: researchers list the quotas of their own projects")
		}
		if _, err := s.visibleProject(ctx, projectID); err != nil {
			return err
		}
	}
	qs, err := s.store.Quotas(ctx, projectID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(qs))
}

// handleFairShare reports, for the period containing `at` (default now), each
// project's allocated, booked and used minutes per instrument. Researchers see their
// own projects' lines only.
func (s *Server) handleFairShare(c echo.Context) error {
	ctx := c.Request().Context()
	me := principal(ctx)
	p := scheduling.Period(c.QueryParam("period"))
	if p == "" {
		p = scheduling.PeriodMonth
	}
	if !p.Valid() {
		return beamledger.InvalidField("period", "must be one of week, month, quarter")
	}
	at := s.now()
	if v := c.QueryParam("at"); v != "" {
		t, err := time.Parse(time.RFC3339, v)
		if err != nil {
			return beamledger.InvalidField("at", "must be an RFC 3339 instant with an offset")
		}
		at = t
	}
	loc, err := s.facilityLocation(ctx)
	if err != nil {
		return err
	}
	from, to := scheduling.PeriodBounds(p, at, loc)
	quotas, err := s.reports().Quotas(ctx, "")
	if err != nil {
		return err
	}
	booked, used, err := s.reports().ShareIntervals(ctx, from, to, s.now())
	if err != nil {
		return err
	}
	lines := scheduling.FairShare(p, at, loc, quotas, booked, used)
	mine, err := s.myProjects(ctx, me)
	if err != nil {
		return err
	}
	out := lines[:0]
	for _, l := range lines {
		if me.CanReadEverything() || mine[l.ProjectID] {
			out = append(out, l)
		}
	}
	return c.JSON(http.StatusOK, listOf(out))
}
