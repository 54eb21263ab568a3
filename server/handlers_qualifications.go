package server

import (
	"net/http"
	"strings"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

// handleQualificationList lists standings: researchers see their own; staff, managers
// and auditors anyone's.
func (s *Server) handleQualificationList(c echo.Context) error {
	ctx := c.Request().Context()
	me := principal(ctx)
	f := scheduling.QualificationFilter{UserID: c.QueryParam("user_id"), InstrumentID: c.QueryParam("instrument_id"),
		IncludeRevoked: c.QueryParam("include_revoked") == "true"}
	if !me.CanReadEverything() {
		if f.UserID != "" && f.UserID != me.UserID {
			return beamledger.Forbidden("researchers see only their own qualifications")
		}
		f.UserID = me.UserID
	}
	qs, err := s.store.Qualifications(ctx, f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(qs))
}

// handleQualificationGrant records a standing granted by staff. The record supports,
// and never replaces, the facility's own safety training and local rules.
func (s *Server) handleQualificationGrant(c echo.Context) error {
	var n scheduling.NewQualification
	if err := bind(c, &n); err != nil {
		return err
	}
	ctx := c.Request().Context()
	n.InstrumentID = c.Param("instrument_id")
	n.GrantedBy = principal(ctx).UserID
	n.Reason = strings.TrimSpace(n.Reason)
	fe := beamledger.FieldErrors{}
	if !accounts.ValidID(n.UserID) {
		fe.Add("user_id", "must be a user id")
	}
	if !n.Level.Valid() {
		fe.Add("level", "must be one of supervised, independent, unattended")
	}
	if n.Reason == "" || len(n.Reason) > 1000 {
		fe.Add("reason", "is required (at most 1000 characters), e.g. the training session that qualified the user")
	}
	if n.ExpiresAfterIdleDays != nil && (*n.ExpiresAfterIdleDays < 1 || *n.ExpiresAfterIdleDays > 3650) {
		fe.Add("expires_after_idle_days", "must be between 1 and 3650")
	}
	if err := fe.Err(); err != nil {
		return err
	}
	if n.UserID == n.GrantedBy {
		return beamledger.Forbidden("nobody grants a qualification to themselves; ask another staff member")
	}
	q, err := s.store.GrantQualification(ctx, n, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, q)
}

func (s *Server) handleQualificationRevoke(c echo.Context) error {
	var in reasonInput
	if err := bind(c, &in); err != nil {
		return err
	}
	if err := in.required(); err != nil {
		return err
	}
	ctx := c.Request().Context()
	q, err := s.store.RevokeQualification(ctx, c.Param("qualification_id"), principal(ctx).UserID, in.Reason, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, q)
}
