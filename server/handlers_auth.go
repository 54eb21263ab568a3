package server

import (
	"context"
	"errors"
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
)

type loginRequest struct {
	Email    string `json:"email"`
	Password string `json:"password"`
}

type tokenResponse struct {
	AccessToken  string `json:"access_token"`
	TokenType    string `json:"token_type"`
	ExpiresIn    int    `json:"expires_in"`
	RefreshToken string `json:"refresh_token"`
}

var errBadLogin = beamledger.Unauthorized("email or password is wrong")

func (s *Server) handleLogin(c echo.Context) error {
	resp, err := s.passwordSignIn(c)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, resp)
}

// passwordSignIn reads an email and password from the request body, checks them
// behind the failure counters and starts a session: the API's login and the sign-in
// page's both come here.
func (s *Server) passwordSignIn(c echo.Context) (tokenResponse, error) {
	var req loginRequest
	if err := bind(c, &req); err != nil {
		return tokenResponse{}, err
	}
	ctx := c.Request().Context()
	email, err := accounts.NormalizeEmail(req.Email)
	if err != nil {
		return tokenResponse{}, err
	}
	if req.Password == "" {
		return tokenResponse{}, beamledger.InvalidField("password", "is required")
	}
	user, err := s.throttledCheckPassword(ctx, email, req.Password, c.RealIP())
	if err != nil {
		return tokenResponse{}, err
	}
	return s.startSession(ctx, user.ID)
}

// throttledCheckPassword is checkPassword behind the per-account and per-address
// failure counters, shared by sign-in and password change so that neither can be used
// to guess a password without limit.
func (s *Server) throttledCheckPassword(ctx context.Context, email, password, address string) (accounts.User, error) {
	keys := []struct {
		key  string
		rule accounts.ThrottleRule
	}{{"account:" + email, s.cfg.LoginPerAccount}, {"address:" + address, s.cfg.LoginPerAddress}}
	for _, k := range keys {
		if err := s.store.CheckLogin(ctx, k.key, k.rule, s.now()); err != nil {
			return accounts.User{}, err
		}
	}
	user, err := s.checkPassword(ctx, email, password)
	if errors.Is(err, errBadLogin) {
		for _, k := range keys {
			if err := s.store.RecordLoginFailure(ctx, k.key, k.rule, s.now()); err != nil {
				return accounts.User{}, err
			}
		}
	}
	if err != nil {
		return accounts.User{}, err
	}
	return user, s.store.ResetLogin(ctx, keys[0].key)
}

// checkPassword verifies a login, spending the same work whether or not the email
// exists, and re-hashes a password stored under older parameters.
func (s *Server) checkPassword(ctx context.Context, email, password string) (accounts.User, error) {
	cred, err := s.store.CredentialsByEmail(ctx, email)
	if errors.Is(err, beamledger.ErrNotFound) || (err == nil && cred.PasswordHash == "") {
		s.hasher.DummyVerify(ctx, password)
		return accounts.User{}, errBadLogin
	}
	if err != nil {
		return accounts.User{}, err
	}
	ok, rehash, err := s.hasher.Verify(ctx, password, cred.PasswordHash)
	if err != nil {
		return accounts.User{}, err
	}
	if !ok || cred.User.Disabled {
		return accounts.User{}, errBadLogin
	}
	if rehash {
		if h, err := s.hasher.Hash(ctx, password); err == nil {
			if err := s.store.SetPasswordHash(ctx, cred.User.ID, h, false); err != nil {
				return accounts.User{}, err
			}
		}
	}
	return cred.User, nil
}

// startSession issues an access token and a new refresh-token family.
func (s *Server) startSession(ctx context.Context, userID string) (tokenResponse, error) {
	refresh, hash, err := accounts.NewOpaqueToken(accounts.RefreshTokenPrefix)
	if err != nil {
		return tokenResponse{}, err
	}
	now := s.now()
	if err := s.store.CreateRefreshToken(ctx, userID, hash, now.Add(s.cfg.RefreshTTL)); err != nil {
		return tokenResponse{}, err
	}
	return s.accessFor(ctx, userID, refresh)
}

func (s *Server) accessFor(ctx context.Context, userID, refresh string) (tokenResponse, error) {
	st, err := s.store.AuthState(ctx, userID)
	if err != nil {
		return tokenResponse{}, err
	}
	if st.Disabled {
		return tokenResponse{}, errBadLogin
	}
	access, err := s.tokens.issue(userID, st.TokenVersion, s.now())
	if err != nil {
		return tokenResponse{}, err
	}
	return tokenResponse{AccessToken: access, TokenType: "Bearer", ExpiresIn: int(s.cfg.AccessTTL.Seconds()), RefreshToken: refresh}, nil
}

type refreshRequest struct {
	RefreshToken string `json:"refresh_token"`
}

func (s *Server) handleRefresh(c echo.Context) error {
	var req refreshRequest
	if err := bind(c, &req); err != nil {
		return err
	}
	if accounts.TokenPrefix(req.RefreshToken) != accounts.RefreshTokenPrefix {
		return beamledger.InvalidField("refresh_token", "is not a refresh token")
	}
	ctx := c.Request().Context()
	next, hash, err := accounts.NewOpaqueToken(accounts.RefreshTokenPrefix)
	if err != nil {
		return err
	}
	now := s.now()
	userID, err := s.store.RotateRefreshToken(ctx, accounts.HashOpaqueToken(req.RefreshToken), hash, now, now.Add(s.cfg.RefreshTTL))
	if err != nil {
		return err
	}
	resp, err := s.accessFor(ctx, userID, next)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, resp)
}

func (s *Server) handleLogout(c echo.Context) error {
	var req refreshRequest
	if err := bind(c, &req); err != nil {
		return err
	}
	if accounts.TokenPrefix(req.RefreshToken) != accounts.RefreshTokenPrefix {
		return beamledger.InvalidField("refresh_token", "is not a refresh token")
	}
	if err := s.store.RevokeRefreshFamily(c.Request().Context(), accounts.HashOpaqueToken(req.RefreshToken), s.now()); err != nil {
		return err
	}
	return c.NoContent(http.StatusNoContent)
}

type passwordChange struct {
	CurrentPassword string `json:"current_password"`
	NewPassword     string `json:"new_password"`
}

// handleChangePassword changes the caller's own password and ends every other session.
func (s *Server) handleChangePassword(c echo.Context) error {
	var req passwordChange
	if err := bind(c, &req); err != nil {
		return err
	}
	ctx := c.Request().Context()
	me, err := s.store.User(ctx, principal(ctx).UserID)
	if err != nil {
		return err
	}
	if _, err := s.throttledCheckPassword(ctx, me.Email, req.CurrentPassword, c.RealIP()); err != nil {
		if errors.Is(err, errBadLogin) {
			return beamledger.InvalidField("current_password", "is wrong")
		}
		return err
	}
	if err := s.setPassword(ctx, me.ID, "new_password", req.NewPassword); err != nil {
		return err
	}
	resp, err := s.startSession(ctx, me.ID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, resp)
}

func (s *Server) setPassword(ctx context.Context, userID, field, password string) error {
	if err := accounts.CheckPasswordPolicy(password, s.cfg.MinPasswordLength); err != nil {
		var de *beamledger.Error
		if errors.As(err, &de) {
			return beamledger.InvalidField(field, de.Fields["password"])
		}
		return err
	}
	h, err := s.hasher.Hash(ctx, password)
	if err != nil {
		return err
	}
	defer s.auth.forget(userID)
	return s.store.SetPasswordHash(ctx, userID, h, true)
}
