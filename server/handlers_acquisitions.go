package server

import (
	"context"
	"io"
	"net/http"
	"strings"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/provenance"
)

// acquisitionBooking checks that the caller may record acquisitions on booking id:
// the booked user, staff or a manager, or an agent of the booking's instrument. Those
// who may not see the booking learn nothing of it.
func (s *Server) acquisitionBooking(ctx context.Context, id string) error {
	me := principal(ctx)
	if me.IsAgent() {
		b, err := s.store.Booking(ctx, id)
		if err != nil || b.InstrumentID != me.InstrumentID {
			return beamledger.NotFound("booking")
		}
		return nil
	}
	b, err := s.visibleBooking(ctx, id)
	if err != nil {
		return err
	}
	if !me.FacilityWide() && b.UserID != me.UserID {
		return beamledger.Forbidden("only the booked user, staff or the instrument's agent record acquisitions on this booking")
	}
	return nil
}

// handleAcquisitionCreate records an acquisition: conditions in mixed units in, the
// stored record with its derived quantities, tuning, calibrations and warnings out.
func (s *Server) handleAcquisitionCreate(c echo.Context) error {
	var in provenance.AcquisitionInput
	if err := bind(c, &in); err != nil {
		return err
	}
	volts, err := in.Normalize(false)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	if err := s.acquisitionBooking(ctx, in.BookingID); err != nil {
		return err
	}
	n := s.newAcquisition(ctx, in, volts)
	a, err := s.store.CreateAcquisition(ctx, n, func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
		return provenance.Record(ac, in)
	})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, a)
}

func (s *Server) newAcquisition(ctx context.Context, in provenance.AcquisitionInput, voltageV float64) provenance.NewAcquisition {
	return provenance.NewAcquisition{Input: in, VoltageV: voltageV, Actor: principal(ctx).ID(), Now: s.now()}
}

// visibleAcquisition loads an acquisition the caller may read: those who read
// everything and the members of its project.
func (s *Server) visibleAcquisition(ctx context.Context, id string) (provenance.Acquisition, error) {
	a, err := s.store.Acquisition(ctx, id)
	if err != nil {
		return a, err
	}
	if _, err := s.visibleProject(ctx, a.ProjectID); err != nil {
		return provenance.Acquisition{}, beamledger.NotFound("acquisition")
	}
	return a, nil
}

func (s *Server) handleAcquisitionGet(c echo.Context) error {
	a, err := s.visibleAcquisition(c.Request().Context(), c.Param("acquisition_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, a)
}

func (s *Server) handleAcquisitionVersions(c echo.Context) error {
	ctx := c.Request().Context()
	a, err := s.visibleAcquisition(ctx, c.Param("acquisition_id"))
	if err != nil {
		return err
	}
	vs, err := s.store.AcquisitionHistory(ctx, a.ID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(vs))
}

// handleAcquisitionCorrect adds a version. Nothing is overwritten: the history keeps
// every version with its reason and author.
func (s *Server) handleAcquisitionCorrect(c echo.Context) error {
	var in provenance.AcquisitionInput
	if err := bind(c, &in); err != nil {
		return err
	}
	volts, err := in.Normalize(true)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	cur, err := s.visibleAcquisition(ctx, c.Param("acquisition_id"))
	if err != nil {
		return err
	}
	me := principal(ctx)
	if !me.FacilityWide() && cur.UserID != me.UserID {
		return beamledger.Forbidden("only the booked user, staff or a manager correct this acquisition")
	}
	n := s.newAcquisition(ctx, in, volts)
	a, err := s.store.CorrectAcquisition(ctx, cur.ID, n, func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
		return provenance.Record(ac, in)
	})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, a)
}

// handleAcquisitionList lists acquisitions: researchers see their projects' only.
func (s *Server) handleAcquisitionList(c echo.Context) error {
	ctx := c.Request().Context()
	f := provenance.AcquisitionFilter{BookingID: c.QueryParam("booking_id"), InstrumentID: c.QueryParam("instrument_id"),
		ProjectID: c.QueryParam("project_id"), SpecimenID: c.QueryParam("specimen_id")}
	limit, err := queryInt(c, "limit", 500, 1, 500)
	if err != nil {
		return err
	}
	f.Limit = int(limit)
	if f.ProjectIDs, err = s.readableProjectIDs(ctx); err != nil {
		return err
	}
	as, err := s.store.Acquisitions(ctx, f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(as))
}

// maxDeriveBody bounds a derive request: operating conditions are a few hundred bytes.
const maxDeriveBody = 64 << 10

// handleDerive computes the derived quantities of operating conditions without
// storing anything, with the facility's detector-regime settings.
func (s *Server) handleDerive(c echo.Context) error {
	if ct := c.Request().Header.Get(echo.HeaderContentType); !strings.HasPrefix(ct, echo.MIMEApplicationJSON) {
		return echo.NewHTTPError(http.StatusUnsupportedMediaType, "send the conditions as application/json")
	}
	body, err := io.ReadAll(io.LimitReader(c.Request().Body, maxDeriveBody+1))
	if err != nil {
		return err
	}
	if len(body) > maxDeriveBody {
		return &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: "operating conditions are larger than 64 KiB"}
	}
	cond, err := provenance.ParseConditions(body)
	if err != nil {
		return err
	}
	settings, err := s.store.OpticsSettings(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, cond.Derive(settings))
}
