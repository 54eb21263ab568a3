package server

import (
	"context"
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/provenance"
	"beamledger/provenance/optics"
	"beamledger/scheduling"
)

// instrumentForRecords loads the instrument named in the path, checking that an agent
// writes only to its own instrument.
func (s *Server) instrumentForRecords(ctx context.Context, id string) (scheduling.Instrument, error) {
	me := principal(ctx)
	if me.IsAgent() && me.InstrumentID != id {
		return scheduling.Instrument{}, beamledger.NotFound("instrument")
	}
	return s.store.Instrument(ctx, id)
}

// handleTuningRecord stores a corrector tuning: staff, managers, or the instrument's
// agent (correctors measure their own coefficients).
func (s *Server) handleTuningRecord(c echo.Context) error {
	var in provenance.TuningInput
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx := c.Request().Context()
	inst, err := s.instrumentForRecords(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	n, err := in.Tuning(inst.ID, principal(ctx).ID())
	if err != nil {
		return err
	}
	if n.MeasuredAt.After(s.now().Add(5 * time.Minute)) {
		return beamledger.InvalidField("measured_at", "is in the future")
	}
	t, err := s.store.RecordTuning(ctx, n, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, t)
}

func (s *Server) handleTuningList(c echo.Context) error {
	ctx := c.Request().Context()
	inst, err := s.instrumentForRecords(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	ts, err := s.store.Tunings(ctx, inst.ID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(ts))
}

func (s *Server) handleTuningGet(c echo.Context) error {
	t, err := s.store.Tuning(c.Request().Context(), c.Param("tuning_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, t)
}

// handleCalibrationRecord stores a calibration measured by staff.
func (s *Server) handleCalibrationRecord(c echo.Context) error {
	var in provenance.CalibrationInput
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx := c.Request().Context()
	inst, err := s.store.Instrument(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	names := make([]string, len(inst.Detectors))
	for i, d := range inst.Detectors {
		names[i] = d.Name
	}
	n, err := in.Calibration(inst.ID, principal(ctx).ID(), names)
	if err != nil {
		return err
	}
	cal, err := s.store.RecordCalibration(ctx, n, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, cal)
}

// handleCalibrationList lists an instrument's calibrations; with ?at=<instant>, only
// those in force then (what an acquisition starting at that instant links).
func (s *Server) handleCalibrationList(c echo.Context) error {
	ctx := c.Request().Context()
	var at *time.Time
	if v := c.QueryParam("at"); v != "" {
		t, err := time.Parse(time.RFC3339, v)
		if err != nil {
			return beamledger.InvalidField("at", "must be an RFC 3339 instant such as 2026-12-07T09:00:00Z")
		}
		at = &t
	}
	inst, err := s.instrumentForRecords(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	cals, err := s.store.Calibrations(ctx, inst.ID, at)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(cals))
}

func (s *Server) handleOpticsSettingsGet(c echo.Context) error {
	st, err := s.store.OpticsSettings(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, st)
}

// handleOpticsSettingsSet replaces how the facility classifies detector signals. It
// changes the derived quantities of acquisitions recorded from now on; stored ones
// keep what they were derived with.
func (s *Server) handleOpticsSettingsSet(c echo.Context) error {
	st := optics.DefaultSettings()
	if err := bind(c, &st); err != nil {
		return err
	}
	if err := st.Validate(); err != nil {
		// Validate words each problem as "field: reason", one per line.
		fe := beamledger.FieldErrors{}
		for _, line := range strings.Split(err.Error(), "\n") {
			field, reason, _ := strings.Cut(line, ": ")
			fe.Add(field, reason)
		}
		return fe.Err()
	}
	out, err := s.store.SetOpticsSettings(c.Request().Context(), st)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}
