package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/provenance"
)

// handleSpecimenCreate registers a specimen: researchers in their own projects, staff
// and managers in any.
func (s *Server) handleSpecimenCreate(c echo.Context) error {
	var n provenance.NewSpecimen
	if err := bind(c, &n); err != nil {
		return err
	}
	if err := n.Normalize(); err != nil {
		return err
	}
	ctx := c.Request().Context()
	if _, err := s.visibleProject(ctx, n.ProjectID); err != nil {
		return err
	}
	n.CreatedBy = principal(ctx).UserID
	sp, err := s.store.CreateSpecimen(ctx, n, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, sp)
}

func (s *Server) handleSpecimenGet(c echo.Context) error {
	ctx := c.Request().Context()
	sp, err := s.store.Specimen(ctx, c.Param("specimen_id"))
	if err != nil {
		return err
	}
	if _, err := s.visibleProject(ctx, sp.ProjectID); err != nil {
		return beamledger.NotFound("specimen")
	}
	return c.JSON(http.StatusOK, sp)
}

// handleSpecimenList lists specimens: researchers see their projects' only.
func (s *Server) handleSpecimenList(c echo.Context) error {
	ctx := c.Request().Context()
	f := provenance.SpecimenFilter{ProjectID: c.QueryParam("project_id")}
	var err error
	if f.ProjectIDs, err = s.readableProjectIDs(ctx); err != nil {
		return err
	}
	sps, err := s.store.Specimens(ctx, f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(sps))
}
