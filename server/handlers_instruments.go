package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

func (s *Server) handleFacility(c echo.Context) error {
	f, err := s.store.Facility(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, f)
}

// handleFacilitySet sets the facility's name, zone and currency (a fresh installation
// has none until a manager sets them).
func (s *Server) handleFacilitySet(c echo.Context) error {
	var f scheduling.Facility
	if err := bind(c, &f); err != nil {
		return err
	}
	if err := f.Normalize(); err != nil {
		return err
	}
	out, err := s.store.SetFacility(c.Request().Context(), f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}

func (s *Server) handleInstrumentList(c echo.Context) error {
	ctx := c.Request().Context()
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return err
	}
	// An agent sees only the instrument its token names.
	if me := principal(ctx); me.IsAgent() {
		mine := ins[:0]
		for _, in := range ins {
			if in.ID == me.InstrumentID {
				mine = append(mine, in)
			}
		}
		ins = mine
	}
	return c.JSON(http.StatusOK, listOf(ins))
}

func (s *Server) handleInstrumentGet(c echo.Context) error {
	ctx := c.Request().Context()
	id := c.Param("instrument_id")
	if me := principal(ctx); me.IsAgent() && me.InstrumentID != id {
		return beamledger.NotFound("instrument")
	}
	in, err := s.store.Instrument(ctx, id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, in)
}

type instrumentInput struct {
	Code                  string                     `json:"code"`
	Name                  string                     `json:"name"`
	Kind                  scheduling.InstrumentKind  `json:"kind"`
	Location              string                     `json:"location"`
	Bookable              *bool                      `json:"bookable"`
	AcceleratingVoltagesV []float64                  `json:"accelerating_voltages_v"`
	Corrector             scheduling.Corrector       `json:"corrector"`
	Detectors             []scheduling.Detector      `json:"detectors"`
	CameraLengthMinM      *float64                   `json:"camera_length_min_m"`
	CameraLengthMaxM      *float64                   `json:"camera_length_max_m"`
	ConditionChecks       scheduling.ConditionChecks `json:"condition_checks"`
}

func (s *Server) handleInstrumentCreate(c echo.Context) error {
	var req instrumentInput
	if err := bind(c, &req); err != nil {
		return err
	}
	in := scheduling.Instrument{
		Code: req.Code, Name: req.Name, Kind: req.Kind, Location: req.Location, Bookable: req.Bookable == nil || *req.Bookable,
		AcceleratingVoltagesV: req.AcceleratingVoltagesV, Corrector: req.Corrector, Detectors: req.Detectors,
		CameraLengthMinM: req.CameraLengthMinM, CameraLengthMaxM: req.CameraLengthMaxM, ConditionChecks: req.ConditionChecks,
	}
	if err := in.Normalize(); err != nil {
		return err
	}
	ctx := c.Request().Context()
	out, err := s.store.CreateInstrument(ctx, in, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, out)
}

func (s *Server) handleAgentTokenList(c echo.Context) error {
	ts, err := s.store.AgentTokens(c.Request().Context(), c.Param("instrument_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(ts))
}

// agentTokenCreated carries the secret, shown this once and never again.
type agentTokenCreated struct {
	accounts.AgentToken
	Token string `json:"token"`
}

func (s *Server) handleAgentTokenCreate(c echo.Context) error {
	var n accounts.NewAgentToken
	if err := bind(c, &n); err != nil {
		return err
	}
	n.InstrumentID = c.Param("instrument_id")
	if err := n.Normalize(s.now()); err != nil {
		return err
	}
	secret, hash, err := accounts.NewOpaqueToken(accounts.AgentTokenPrefix)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	t, err := s.store.CreateAgentToken(ctx, n, principal(ctx).UserID, hash)
	if err != nil {
		return err
	}
	c.Response().Header().Set("Cache-Control", "no-store")
	return c.JSON(http.StatusCreated, agentTokenCreated{AgentToken: t, Token: secret})
}

func (s *Server) handleAgentTokenRevoke(c echo.Context) error {
	t, err := s.store.RevokeAgentToken(c.Request().Context(), c.Param("instrument_id"), c.Param("token_id"), s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, t)
}

// handleConditionLimitsSet replaces the limits acquisitions on the instrument are held
// to, and whether a condition outside them is refused or accepted with a warning.
// Acquisitions already recorded keep what they were checked against.
func (s *Server) handleConditionLimitsSet(c echo.Context) error {
	var l scheduling.ConditionLimits
	if err := bind(c, &l); err != nil {
		return err
	}
	if err := l.Normalize(); err != nil {
		return err
	}
	ctx := c.Request().Context()
	in, err := s.store.SetConditionLimits(ctx, c.Param("instrument_id"), l, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, in)
}
