package server

import (
	"context"
	"errors"
	"net/http"
	"slices"
	"strings"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
)

// rule is the access rule of one route: who may call it at all. Object-level checks
// (is this the caller's project?) happen in the handler, through accounts.Principal.
type rule struct {
	// public routes need no credentials.
	public bool
	// roles lists the user roles allowed.
	roles []accounts.Role
	// scope, when set, also admits instrument agents holding it.
	scope accounts.Scope
}

var (
	everyone    = []accounts.Role{accounts.RoleManager, accounts.RoleStaff, accounts.RoleResearcher, accounts.RoleAuditor}
	managers    = []accounts.Role{accounts.RoleManager}
	facilityOps = []accounts.Role{accounts.RoleManager, accounts.RoleStaff}
	readersAll  = []accounts.Role{accounts.RoleManager, accounts.RoleStaff, accounts.RoleAuditor}
)

func open() rule                        { return rule{public: true} }
func users(roles ...accounts.Role) rule { return rule{roles: roles} }
func usersOrAgent(s accounts.Scope, roles ...accounts.Role) rule {
	return rule{roles: roles, scope: s}
}

var errNoCredentials = beamledger.Unauthorized("sign in: send Authorization: Bearer <access token>")

// authorize authenticates the caller (unless the route is public) and applies the
// route's rule. It runs as route middleware so that no route can be registered
// without a rule.
func (s *Server) authorize(r rule) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			if r.public {
				return next(c)
			}
			p, err := s.authenticate(c.Request().Context(), c.Request().Header.Get(echo.HeaderAuthorization))
			if err != nil {
				return err
			}
			ctx := accounts.WithPrincipal(c.Request().Context(), p)
			c.SetRequest(c.Request().WithContext(ctx))
			if !r.allows(p) {
				return beamledger.Forbidden("your role may not do this")
			}
			return next(c)
		}
	}
}

func (r rule) allows(p accounts.Principal) bool {
	if p.IsAgent() {
		return r.scope != "" && p.HasScope(r.scope)
	}
	return slices.Contains(r.roles, p.Role)
}

// authenticate resolves a bearer credential: an agent token (opaque, prefixed) or an
// access JWT. The user's current state is read per request, so a disabled user or a
// changed password stops every access token at once.
func (s *Server) authenticate(ctx context.Context, header string) (accounts.Principal, error) {
	scheme, cred, ok := strings.Cut(header, " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") || cred == "" {
		return accounts.Principal{}, errNoCredentials
	}
	cred = strings.TrimSpace(cred)
	if accounts.TokenPrefix(cred) == accounts.AgentTokenPrefix {
		t, err := s.store.AgentTokenByHash(ctx, accounts.HashOpaqueToken(cred), s.now())
		if err != nil {
			return accounts.Principal{}, err
		}
		return accounts.Principal{AgentTokenID: t.ID, InstrumentID: t.InstrumentID, Scopes: t.Scopes}, nil
	}
	claims, err := s.tokens.parse(cred)
	if err != nil {
		return accounts.Principal{}, beamledger.Unauthorized("access token is not valid; sign in or refresh")
	}
	st, err := s.auth.state(ctx, claims.Subject, s.store.AuthState)
	if errors.Is(err, beamledger.ErrNotFound) || (err == nil && (st.Disabled || st.TokenVersion != claims.TokenVersion)) {
		return accounts.Principal{}, beamledger.Unauthorized("access token is no longer valid; sign in again")
	}
	if err != nil {
		return accounts.Principal{}, err
	}
	return accounts.Principal{UserID: claims.Subject, Role: st.Role}, nil
}

// principal returns the authenticated caller; handlers of non-public routes call it.
func principal(ctx context.Context) accounts.Principal {
	p, _ := accounts.PrincipalFrom(ctx)
	return p
}

// bind decodes a JSON body strictly: unknown fields are an error naming the field, so a
// client sending "rolee" or a field it may not set learns of it.
func bind(c echo.Context, v any) error {
	ct := c.Request().Header.Get(echo.HeaderContentType)
	if c.Request().ContentLength != 0 && !strings.HasPrefix(ct, echo.MIMEApplicationJSON) {
		return echo.NewHTTPError(http.StatusUnsupportedMediaType, "send the body as application/json")
	}
	return decodeJSON(c.Request().Body, v)
}
