package server

import (
	"context"
	"sync"
	"time"

	"beamledger/accounts"
)

// authCache keeps each user's account state (role, disabled, token version) for a
// short while, so that a burst of requests does not read it once per request. Changes
// made through this process forget the entry at once; changes made through another
// process are seen within the TTL. A zero TTL reads storage every time.
type authCache struct {
	ttl time.Duration
	mu  sync.Mutex
	m   map[string]authEntry
}

type authEntry struct {
	state accounts.AuthState
	until time.Time
}

// maxAuthEntries bounds the cache; past it the cache starts afresh.
const maxAuthEntries = 10000

func newAuthCache(ttl time.Duration) *authCache {
	return &authCache{ttl: ttl, m: map[string]authEntry{}}
}

// state returns the user's account state, from the cache when fresh.
func (c *authCache) state(ctx context.Context, userID string, load func(context.Context, string) (accounts.AuthState, error)) (accounts.AuthState, error) {
	if c.ttl <= 0 {
		return load(ctx, userID)
	}
	now := time.Now() // monotonic: the cache's own clock, not the facility's
	c.mu.Lock()
	e, ok := c.m[userID]
	c.mu.Unlock()
	if ok && now.Before(e.until) {
		return e.state, nil
	}
	st, err := load(ctx, userID)
	if err != nil {
		return st, err
	}
	c.mu.Lock()
	if len(c.m) >= maxAuthEntries {
		c.m = map[string]authEntry{}
	}
	c.m[userID] = authEntry{state: st, until: now.Add(c.ttl)}
	c.mu.Unlock()
	return st, nil
}

// forget drops a user's entry after a change to their account.
func (c *authCache) forget(userID string) {
	c.mu.Lock()
	delete(c.m, userID)
	c.mu.Unlock()
}
