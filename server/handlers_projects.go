package server

import (
	"context"
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
)

func (s *Server) handleProjectList(c echo.Context) error {
	ctx := c.Request().Context()
	me := principal(ctx)
	var f accounts.ProjectFilter
	if !me.CanReadEverything() {
		f.MemberID = me.UserID
	}
	ps, err := s.store.Projects(ctx, f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(ps))
}

func (s *Server) handleProjectCreate(c echo.Context) error {
	var n accounts.NewProject
	if err := bind(c, &n); err != nil {
		return err
	}
	if err := n.Normalize(); err != nil {
		return err
	}
	p, err := s.store.CreateProject(c.Request().Context(), n)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, p)
}

// visibleProject loads a project the caller may read; others' projects are "not
// found", so ids of foreign projects cannot be probed (OWASP API1).
func (s *Server) visibleProject(ctx context.Context, id string) (accounts.Project, error) {
	p, err := s.store.Project(ctx, id)
	if err != nil {
		return p, err
	}
	if !principal(ctx).CanReadProject(p) {
		return accounts.Project{}, beamledger.NotFound("project")
	}
	return p, nil
}

func (s *Server) handleProjectGet(c echo.Context) error {
	p, err := s.visibleProject(c.Request().Context(), c.Param("project_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, p)
}

func (s *Server) handleProjectPatch(c echo.Context) error {
	var patch accounts.ProjectPatch
	if err := bind(c, &patch); err != nil {
		return err
	}
	if err := patch.Normalize(); err != nil {
		return err
	}
	p, err := s.store.UpdateProject(c.Request().Context(), c.Param("project_id"), patch)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, p)
}

// membershipProject checks the caller may change the project's members: a manager, or
// the project's principal investigator.
func (s *Server) membershipProject(ctx context.Context, id string) error {
	p, err := s.visibleProject(ctx, id)
	if err != nil {
		return err
	}
	me := principal(ctx)
	if me.Role != accounts.RoleManager && p.PrincipalInvestigatorID != me.UserID {
		return beamledger.Forbidden("only a manager or the project's principal investigator changes its members")
	}
	return nil
}

func (s *Server) handleMemberAdd(c echo.Context) error {
	ctx := c.Request().Context()
	if err := s.membershipProject(ctx, c.Param("project_id")); err != nil {
		return err
	}
	p, err := s.store.AddMember(ctx, c.Param("project_id"), c.Param("user_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, p)
}

func (s *Server) handleMemberRemove(c echo.Context) error {
	ctx := c.Request().Context()
	if err := s.membershipProject(ctx, c.Param("project_id")); err != nil {
		return err
	}
	p, err := s.store.RemoveMember(ctx, c.Param("project_id"), c.Param("user_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, p)
}
