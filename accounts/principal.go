package accounts

import (
	"context"
	"slices"
)

// Principal is who is making a request: a signed-in user, or an instrument agent
// authenticated by its token.
type Principal struct {
	// UserID is set for users; empty for agents.
	UserID string
	// Role is the user's current role (read from storage per request, not from the token).
	Role Role
	// AgentTokenID, InstrumentID and Scopes are set for agents only.
	AgentTokenID string
	InstrumentID string
	Scopes       []Scope
}

// IsAgent reports whether the principal is an instrument agent rather than a user.
func (p Principal) IsAgent() bool { return p.AgentTokenID != "" }

// ID names the principal for logs and audit: the user id, or "agent:<token id>".
func (p Principal) ID() string {
	if p.IsAgent() {
		return "agent:" + p.AgentTokenID
	}
	return p.UserID
}

// HasScope reports whether an agent principal carries scope s.
func (p Principal) HasScope(s Scope) bool { return p.IsAgent() && slices.Contains(p.Scopes, s) }

// FacilityWide reports whether the principal may act on every project's objects.
func (p Principal) FacilityWide() bool { return !p.IsAgent() && p.Role.FacilityWide() }

// CanReadEverything reports whether the principal reads every project's records
// (managers, staff and auditors).
func (p Principal) CanReadEverything() bool {
	return !p.IsAgent() && (p.Role.FacilityWide() || p.Role == RoleAuditor)
}

// CanReadProject reports whether the principal may read the project and its objects.
func (p Principal) CanReadProject(proj Project) bool {
	return p.CanReadEverything() || (!p.IsAgent() && proj.HasMember(p.UserID))
}

// CanReadUser reports whether the principal may read the user's record: themselves,
// or anyone for those who read everything.
func (p Principal) CanReadUser(userID string) bool {
	return p.CanReadEverything() || (!p.IsAgent() && p.UserID == userID)
}

type principalKey struct{}

// WithPrincipal returns a context carrying p.
func WithPrincipal(ctx context.Context, p Principal) context.Context {
	return context.WithValue(ctx, principalKey{}, p)
}

// PrincipalFrom returns the principal carried by ctx, if any.
func PrincipalFrom(ctx context.Context) (Principal, bool) {
	p, ok := ctx.Value(principalKey{}).(Principal)
	return p, ok
}
