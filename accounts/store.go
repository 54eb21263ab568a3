package accounts

import (
	"context"
	"time"
)

// UserFilter narrows a user listing.
type UserFilter struct {
	// Role, when set, keeps only users with this role.
	Role Role
	// IncludeDisabled keeps disabled users too.
	IncludeDisabled bool
}

// AuthState is what a request needs to accept an access token for a user.
type AuthState struct {
	Role     Role
	Disabled bool
	// TokenVersion changes on password change and disabling; access tokens carry the
	// version they were issued under and are refused once it moves on.
	TokenVersion int64
}

// UserStore persists users.
type UserStore interface {
	// CreateUser stores the user with its password hash ("" for none). ErrConflict
	// when the email is already taken (case-insensitively).
	CreateUser(ctx context.Context, u NewUser, passwordHash string) (User, error)
	// User returns one user. ErrNotFound when there is none.
	User(ctx context.Context, id string) (User, error)
	// Users lists users ordered by email.
	Users(ctx context.Context, f UserFilter) ([]User, error)
	// CredentialsByEmail returns the user and password hash for a normalised email.
	// ErrNotFound when there is none.
	CredentialsByEmail(ctx context.Context, email string) (Credentials, error)
	// UpdateUser applies patch. Disabling a user also revokes every refresh token and
	// moves the token version on, so no access token of theirs is accepted any more.
	// ErrNotFound when there is no such user.
	UpdateUser(ctx context.Context, id string, patch UserPatch) (User, error)
	// SetPasswordHash replaces the hash. With revokeSessions it also revokes every
	// refresh token and moves the token version on. ErrNotFound when no such user.
	SetPasswordHash(ctx context.Context, id, hash string, revokeSessions bool) error
	// AuthState returns the user's current role, disabled flag and token version.
	// ErrNotFound when there is no such user.
	AuthState(ctx context.Context, id string) (AuthState, error)
}

// SessionStore persists refresh tokens, which are opaque, stored hashed and rotate on use.
type SessionStore interface {
	// CreateRefreshToken starts a new token family for the user.
	CreateRefreshToken(ctx context.Context, userID string, hash []byte, expiresAt time.Time) error
	// RotateRefreshToken marks the token with oldHash used and stores newHash in its
	// family, atomically, returning the user id. ErrUnauthorized when the token is
	// unknown, expired, revoked, or belongs to a disabled user. A token presented a
	// second time (a replay) revokes its whole family and returns ErrUnauthorized.
	RotateRefreshToken(ctx context.Context, oldHash, newHash []byte, now, expiresAt time.Time) (string, error)
	// RevokeRefreshFamily revokes the family the token belongs to (logout). Unknown
	// tokens are ignored, so logout cannot be used to probe for valid tokens.
	RevokeRefreshFamily(ctx context.Context, hash []byte, now time.Time) error
}

// ThrottleRule is how many failures a key may have in a window before it is locked out
// until the window ends.
type ThrottleRule struct {
	MaxFailures int
	Window      time.Duration
}

// LoginThrottle counts failed logins per key (an account, a client address), shared by
// every server process through storage.
type LoginThrottle interface {
	// CheckLogin returns a RateLimited error with RetryAfter when key is locked out.
	CheckLogin(ctx context.Context, key string, rule ThrottleRule, now time.Time) error
	// RecordLoginFailure counts a failure for key.
	RecordLoginFailure(ctx context.Context, key string, rule ThrottleRule, now time.Time) error
	// ResetLogin clears key after a successful login.
	ResetLogin(ctx context.Context, key string) error
}

// ProjectFilter narrows a project listing.
type ProjectFilter struct {
	// MemberID, when set, keeps only projects this user belongs to.
	MemberID string
}

// ProjectStore persists projects and their members.
type ProjectStore interface {
	// CreateProject stores the project with its principal investigator as first member.
	// ErrConflict when the code is taken; ErrInvalid when the investigator is unknown.
	CreateProject(ctx context.Context, p NewProject) (Project, error)
	// Project returns one project. ErrNotFound when there is none.
	Project(ctx context.Context, id string) (Project, error)
	// Projects lists projects ordered by code.
	Projects(ctx context.Context, f ProjectFilter) ([]Project, error)
	// UpdateProject applies patch; a new investigator becomes a member. ErrNotFound.
	UpdateProject(ctx context.Context, id string, patch ProjectPatch) (Project, error)
	// AddMember adds a user (idempotent). ErrNotFound for an unknown project;
	// ErrInvalid for an unknown user.
	AddMember(ctx context.Context, projectID, userID string) (Project, error)
	// RemoveMember removes a user. ErrConflict when the user is the principal
	// investigator; ErrNotFound when the project or membership does not exist.
	RemoveMember(ctx context.Context, projectID, userID string) (Project, error)
}

// AgentTokenStore persists instrument-agent tokens.
type AgentTokenStore interface {
	// CreateAgentToken stores a token's hash. ErrNotFound for an unknown instrument.
	CreateAgentToken(ctx context.Context, t NewAgentToken, createdBy string, hash []byte) (AgentToken, error)
	// AgentTokens lists an instrument's tokens, newest first. ErrNotFound for an
	// unknown instrument.
	AgentTokens(ctx context.Context, instrumentID string) ([]AgentToken, error)
	// RevokeAgentToken revokes one token of the instrument (idempotent). ErrNotFound.
	RevokeAgentToken(ctx context.Context, instrumentID, id string, now time.Time) (AgentToken, error)
	// AgentTokenByHash authenticates a presented token and notes its use.
	// ErrUnauthorized when unknown, revoked or expired.
	AgentTokenByHash(ctx context.Context, hash []byte, now time.Time) (AgentToken, error)
}
