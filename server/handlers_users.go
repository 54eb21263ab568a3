package server

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
)

func (s *Server) handleMe(c echo.Context) error {
	ctx := c.Request().Context()
	u, err := s.store.User(ctx, principal(ctx).UserID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, u)
}

func (s *Server) handleUserList(c echo.Context) error {
	f := accounts.UserFilter{IncludeDisabled: c.QueryParam("include_disabled") == "true"}
	if r := c.QueryParam("role"); r != "" {
		role, err := accounts.ParseRole("role", r)
		if err != nil {
			return err
		}
		f.Role = role
	}
	us, err := s.store.Users(c.Request().Context(), f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(us))
}

func (s *Server) handleUserCreate(c echo.Context) error {
	var n accounts.NewUser
	if err := bind(c, &n); err != nil {
		return err
	}
	if err := n.Normalize(s.cfg.MinPasswordLength); err != nil {
		return err
	}
	ctx := c.Request().Context()
	h, err := s.hasher.Hash(ctx, n.Password)
	if err != nil {
		return err
	}
	u, err := s.store.CreateUser(ctx, n, h)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, u)
}

func (s *Server) handleUserGet(c echo.Context) error {
	ctx := c.Request().Context()
	id := c.Param("user_id")
	if !principal(ctx).CanReadUser(id) {
		return beamledger.NotFound("user")
	}
	u, err := s.store.User(ctx, id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, u)
}

// handleUserPatch lets managers change anything and everyone else change only their
// own display name and ORCID iD: role and disabled are properties a user may not set
// on themselves (OWASP API3, broken object-property authorization).
func (s *Server) handleUserPatch(c echo.Context) error {
	var p accounts.UserPatch
	if err := bind(c, &p); err != nil {
		return err
	}
	ctx := c.Request().Context()
	me, id := principal(ctx), c.Param("user_id")
	if me.Role != accounts.RoleManager {
		if !me.CanReadUser(id) {
			return beamledger.NotFound("user")
		}
		if me.UserID != id {
			return beamledger.Forbidden("only managers change other users")
		}
		if p.Role != nil {
			return &beamledger.Error{Kind: beamledger.ErrForbidden, Message: "only managers change roles", Fields: map[string]string{"role": "may be set by managers only"}}
		}
		if p.Disabled != nil {
			return &beamledger.Error{Kind: beamledger.ErrForbidden, Message: "only managers disable users", Fields: map[string]string{"disabled": "may be set by managers only"}}
		}
	} else if id == me.UserID && ((p.Disabled != nil && *p.Disabled) || (p.Role != nil && *p.Role != accounts.RoleManager)) {
		// A facility must not lock itself out by a manager demoting or disabling themself.
		return beamledger.Conflict("managers cannot demote or disable themselves; ask another manager")
	}
	if err := p.Normalize(); err != nil {
		return err
	}
	if p.Empty() {
		return beamledger.Invalid("nothing to change: send at least one of display_name, orcid, role, disabled", nil)
	}
	u, err := s.store.UpdateUser(ctx, id, p)
	s.auth.forget(id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, u)
}

type passwordReset struct {
	NewPassword string `json:"new_password"`
}

// handleUserResetPassword lets a manager set a user's password, ending their sessions.
func (s *Server) handleUserResetPassword(c echo.Context) error {
	var req passwordReset
	if err := bind(c, &req); err != nil {
		return err
	}
	ctx := c.Request().Context()
	id := c.Param("user_id")
	if _, err := s.store.User(ctx, id); err != nil {
		return err
	}
	if err := s.setPassword(ctx, id, "new_password", req.NewPassword); err != nil {
		return err
	}
	return c.NoContent(http.StatusNoContent)
}

// list is the envelope of every collection answer, leaving room for paging.
type list[T any] struct {
	Items []T `json:"items"`
}

func listOf[T any](items []T) list[T] {
	if items == nil {
		items = []T{}
	}
	return list[T]{Items: items}
}
