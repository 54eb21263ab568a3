package accounts

import (
	"context"
	"time"
)

// FeedTokenPrefix starts every calendar-feed token.
const FeedTokenPrefix = "blfeed"

// FeedToken lets a calendar client read one user's feeds. Calendar clients cannot send
// an Authorization header, so the secret travels in the feed URL; it grants read access
// to calendars only and can be revoked at any time.
type FeedToken struct {
	ID        string     `json:"id"`
	UserID    string     `json:"user_id"`
	CreatedAt time.Time  `json:"created_at"`
	RevokedAt *time.Time `json:"revoked_at,omitempty"`
}

// FeedTokenStore persists feed tokens, hashed.
type FeedTokenStore interface {
	// CreateFeedToken stores a token's hash for the user.
	CreateFeedToken(ctx context.Context, userID string, hash []byte) (FeedToken, error)
	// FeedTokens lists the user's tokens, newest first.
	FeedTokens(ctx context.Context, userID string) ([]FeedToken, error)
	// RevokeFeedToken revokes one of the user's tokens (idempotent). ErrNotFound when
	// the user has no such token.
	RevokeFeedToken(ctx context.Context, userID, id string, now time.Time) (FeedToken, error)
	// FeedTokenUser returns the user a live token belongs to. ErrNotFound when the
	// token is unknown or revoked, or its user is disabled.
	FeedTokenUser(ctx context.Context, hash []byte) (string, error)
}
