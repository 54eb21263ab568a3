package server

import (
	"crypto/rand"
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
)

// The web pages keep their session in cookies the page scripts cannot read: the
// access token, the refresh token (SameSite=Strict: never sent from another site)
// and a CSRF token that each page repeats in the X-CSRF-Token header.
const (
	cookieAccess  = "beamledger_session"
	cookieRefresh = "beamledger_refresh"
	cookieCSRF    = "beamledger_csrf"
	headerCSRF    = "X-CSRF-Token"
)

var errCSRF = beamledger.Forbidden("the page's CSRF token is missing or stale, or the request came from another site; reload the page and try again")

// crossOrigin refuses state-changing requests a browser marks as coming from
// another origin (Sec-Fetch-Site, else Origin against Host).
var crossOrigin = http.NewCrossOriginProtection()

// cookie builds a session cookie: HttpOnly always, Secure outside the demo (which
// serves plain HTTP on 127.0.0.1).
func (s *Server) cookie(name, value, path string, maxAge time.Duration, site http.SameSite) *http.Cookie {
	return &http.Cookie{Name: name, Value: value, Path: path, MaxAge: int(maxAge.Seconds()),
		HttpOnly: true, Secure: !s.cfg.Demo, SameSite: site}
}

// setSessionCookies stores a token pair from sign-in or refresh.
func (s *Server) setSessionCookies(c echo.Context, t tokenResponse) {
	c.SetCookie(s.cookie(cookieAccess, t.AccessToken, "/", s.cfg.RefreshTTL, http.SameSiteLaxMode))
	c.SetCookie(s.cookie(cookieRefresh, t.RefreshToken, "/", s.cfg.RefreshTTL, http.SameSiteStrictMode))
}

func (s *Server) clearSessionCookies(c echo.Context) {
	c.SetCookie(s.cookie(cookieAccess, "", "/", -time.Second, http.SameSiteLaxMode))
	c.SetCookie(s.cookie(cookieRefresh, "", "/", -time.Second, http.SameSiteStrictMode))
}

// csrfToken returns the browser's CSRF token, issuing one when it has none.
func (s *Server) csrfToken(c echo.Context) string {
	if k, err := c.Cookie(cookieCSRF); err == nil && len(k.Value) >= 32 {
		return k.Value
	}
	if t, ok := c.Get(cookieCSRF).(string); ok {
		return t
	}
	b := make([]byte, 32)
	_, _ = rand.Read(b)
	t := base64.RawURLEncoding.EncodeToString(b)
	c.Set(cookieCSRF, t)
	c.SetCookie(s.cookie(cookieCSRF, t, "/", 0, http.SameSiteStrictMode))
	return t
}

// checkCSRF admits a state-changing cookie-authenticated request only from this
// origin and only with the page's token in the X-CSRF-Token header.
func checkCSRF(c echo.Context) error {
	if err := crossOrigin.Check(c.Request()); err != nil {
		return errCSRF
	}
	k, err := c.Cookie(cookieCSRF)
	if err != nil || k.Value == "" {
		return errCSRF
	}
	sent := c.Request().Header.Get(headerCSRF)
	if subtle.ConstantTimeCompare([]byte(sent), []byte(k.Value)) != 1 {
		return errCSRF
	}
	return nil
}

func safeMethod(m string) bool {
	return m == http.MethodGet || m == http.MethodHead || m == http.MethodOptions
}

// cookieCredentials lets the pages and their scripts use the session cookie: a
// request without an Authorization header carries the cookie's access token as its
// bearer credential, after the CSRF check for anything but a read, and is then
// authorized by its route's rule like any other. A page opened with an expired
// access cookie first trades the refresh cookie for a new pair; a browser asking
// for a page with no session at all is sent to the sign-in form. Requests with their
// own Authorization header are left alone: no browser adds one on another site's
// behalf.
func (s *Server) cookieCredentials(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		req := c.Request()
		if req.Header.Get(echo.HeaderAuthorization) != "" {
			return next(c)
		}
		page := safeMethod(req.Method) && isPagePath(req.URL.Path)
		token := ""
		if k, err := c.Cookie(cookieAccess); err == nil && k.Value != "" {
			token = k.Value
		}
		if page && token != "" {
			if p, err := s.authenticate(req.Context(), "Bearer "+token); err != nil || p.IsAgent() {
				token = ""
			}
		}
		if page && token == "" {
			if t, err := s.rotateRefreshCookie(c); err == nil {
				token = t.AccessToken
			}
		}
		if token == "" {
			if page && strings.Contains(req.Header.Get(echo.HeaderAccept), echo.MIMETextHTML) {
				return c.Redirect(http.StatusSeeOther, "/signin")
			}
			return next(c)
		}
		if !safeMethod(req.Method) {
			if err := checkCSRF(c); err != nil {
				return err
			}
		}
		req.Header.Set(echo.HeaderAuthorization, "Bearer "+token)
		return next(c)
	}
}

// signedIn reports whether the browser holds a usable session cookie (for the
// sign-in page, which sends a signed-in visitor on to the overview).
func (s *Server) signedIn(c echo.Context) bool {
	k, err := c.Cookie(cookieAccess)
	if err != nil || k.Value == "" {
		return false
	}
	p, err := s.authenticate(c.Request().Context(), "Bearer "+k.Value)
	return err == nil && !p.IsAgent()
}

// rotateRefreshCookie exchanges the refresh cookie for a new token pair and stores it.
func (s *Server) rotateRefreshCookie(c echo.Context) (tokenResponse, error) {
	k, err := c.Cookie(cookieRefresh)
	if err != nil || accounts.TokenPrefix(k.Value) != accounts.RefreshTokenPrefix {
		return tokenResponse{}, errNoCredentials
	}
	ctx := c.Request().Context()
	next, hash, err := accounts.NewOpaqueToken(accounts.RefreshTokenPrefix)
	if err != nil {
		return tokenResponse{}, err
	}
	now := s.now()
	userID, err := s.store.RotateRefreshToken(ctx, accounts.HashOpaqueToken(k.Value), hash, now, now.Add(s.cfg.RefreshTTL))
	if err != nil {
		s.clearSessionCookies(c)
		return tokenResponse{}, err
	}
	t, err := s.accessFor(ctx, userID, next)
	if err != nil {
		return tokenResponse{}, err
	}
	s.setSessionCookies(c, t)
	return t, nil
}

// handleSignIn checks an email and password sent by the sign-in page's script (the
// same JSON as POST /api/v1/auth/login, with the page's CSRF token) and starts a
// cookie session: the tokens go into cookies no script can read.
func (s *Server) handleSignIn(c echo.Context) error {
	if err := checkCSRF(c); err != nil {
		return err
	}
	t, err := s.passwordSignIn(c)
	if err != nil {
		return err
	}
	s.setSessionCookies(c, t)
	return c.NoContent(http.StatusNoContent)
}

// handleSignOut ends the session's refresh family and clears the cookies.
func (s *Server) handleSignOut(c echo.Context) error {
	if err := checkCSRF(c); err != nil {
		return err
	}
	if k, err := c.Cookie(cookieRefresh); err == nil && accounts.TokenPrefix(k.Value) == accounts.RefreshTokenPrefix {
		if err := s.store.RevokeRefreshFamily(c.Request().Context(), accounts.HashOpaqueToken(k.Value), s.now()); err != nil &&
			!errors.Is(err, beamledger.ErrNotFound) {
			return err
		}
	}
	s.clearSessionCookies(c)
	return c.NoContent(http.StatusNoContent)
}

// handleSessionRefresh renews an expired access cookie for a page's scripts.
func (s *Server) handleSessionRefresh(c echo.Context) error {
	if err := checkCSRF(c); err != nil {
		return err
	}
	if _, err := s.rotateRefreshCookie(c); err != nil {
		return beamledger.Unauthorized("the session has ended; sign in again")
	}
	return c.NoContent(http.StatusNoContent)
}
