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
//
// Requests that miss while the same user's state is being read wait for that read
// instead of starting their own: when an entry expires under load, every request in
// flight for the user would otherwise read it at once, each holding a database
// connection the bookings are queueing for.
type authCache struct {
	ttl     time.Duration
	mu      sync.Mutex
	m       map[string]authEntry
	loading map[string]*authLoad
}

type authEntry struct {
	state accounts.AuthState
	until time.Time
}

// authLoad is one read of a user's state in flight; done closes when it ends.
type authLoad struct {
	done  chan struct{}
	state accounts.AuthState
	err   error
}

// maxAuthEntries bounds the cache; past it the cache starts afresh.
const maxAuthEntries = 10000

func newAuthCache(ttl time.Duration) *authCache {
	return &authCache{ttl: ttl, m: map[string]authEntry{}, loading: map[string]*authLoad{}}
}

// state returns the user's account state, from the cache when fresh, else from the
// read in flight for the user, else from load.
func (c *authCache) state(ctx context.Context, userID string, load func(context.Context, string) (accounts.AuthState, error)) (accounts.AuthState, error) {
	if c.ttl <= 0 {
		return load(ctx, userID)
	}
	now := time.Now() // monotonic: the cache's own clock, not the facility's
	c.mu.Lock()
	if e, ok := c.m[userID]; ok && now.Before(e.until) {
		c.mu.Unlock()
		return e.state, nil
	}
	if l, ok := c.loading[userID]; ok {
		c.mu.Unlock()
		select {
		case <-l.done:
		case <-ctx.Done():
			return accounts.AuthState{}, ctx.Err()
		}
		if l.err != nil {
			// The failure may be the other request's own (it was cancelled): read anew.
			return load(ctx, userID)
		}
		return l.state, nil
	}
	l := &authLoad{done: make(chan struct{})}
	c.loading[userID] = l
	c.mu.Unlock()
	defer close(l.done)
	l.state, l.err = load(ctx, userID)
	c.mu.Lock()
	// A forget during the read took the load out of c.loading: its state may predate
	// the change, so it is not kept.
	if c.loading[userID] == l {
		delete(c.loading, userID)
		if l.err == nil {
			if len(c.m) >= maxAuthEntries {
				c.m = map[string]authEntry{}
			}
			c.m[userID] = authEntry{state: l.state, until: now.Add(c.ttl)}
		}
	}
	c.mu.Unlock()
	return l.state, l.err
}

// forget drops a user's entry after a change to their account; requests arriving
// after it read the state anew rather than wait for a read begun before the change.
func (c *authCache) forget(userID string) {
	c.mu.Lock()
	delete(c.m, userID)
	delete(c.loading, userID)
	c.mu.Unlock()
}
