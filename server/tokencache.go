package server

import (
	"strings"
	"sync"
	"time"

	"github.com/golang-jwt/jwt/v5"
)

// verifiedTokens remembers access tokens that parse has fully verified (signature,
// algorithm, type, key id, issuer, audience and times), so that the same token sent
// again costs a map lookup instead of an Ed25519 verification and a JSON decode.
// An entry answers only inside the window in which a full verification would pass
// with the same result: from the token's iat and nbf (less the leeway) until its exp.
// Past exp the token is verified in full again, which applies the leeway and then
// refuses it. It caches the token's proof only: the account check (authCache, with
// its own bound) still runs on every request, so a disabled user, a password change
// or a reset refuses a cached token as it refuses any other.
type verifiedTokens struct {
	mu sync.Mutex
	m  map[string]verifiedToken
}

type verifiedToken struct {
	claims *accessClaims
	// from and until bound the instants at which the token passes the time checks
	// without relying on the leeway after exp.
	from, until time.Time
}

// maxVerifiedTokens bounds the cache. Only tokens this facility's keys signed get in,
// so the bound is about memory, not about an attacker filling it.
const maxVerifiedTokens = 10000

func newVerifiedTokens() *verifiedTokens {
	return &verifiedTokens{m: map[string]verifiedToken{}}
}

// get returns the claims of raw when it was verified and now lies inside its window.
// The claims are shared: callers must not change them.
func (v *verifiedTokens) get(raw string, now time.Time) (*accessClaims, bool) {
	v.mu.Lock()
	e, ok := v.m[raw]
	v.mu.Unlock()
	if !ok || now.Before(e.from) || !now.Before(e.until) {
		return nil, false
	}
	return e.claims, true
}

// put remembers a verified token. A full cache first drops expired entries, and
// starts afresh when that frees nothing.
func (v *verifiedTokens) put(raw string, claims *accessClaims, leeway time.Duration, now time.Time) {
	if claims.ExpiresAt == nil || !now.Before(claims.ExpiresAt.Time) {
		return // inside the leeway after exp: no window to serve from
	}
	e := verifiedToken{claims: claims, until: claims.ExpiresAt.Time}
	for _, t := range []*jwt.NumericDate{claims.IssuedAt, claims.NotBefore} {
		if t != nil && t.Add(-leeway).After(e.from) {
			e.from = t.Add(-leeway)
		}
	}
	v.mu.Lock()
	defer v.mu.Unlock()
	if len(v.m) >= maxVerifiedTokens {
		for k, old := range v.m {
			if !now.Before(old.until) {
				delete(v.m, k)
			}
		}
		if len(v.m) >= maxVerifiedTokens {
			v.m = map[string]verifiedToken{}
		}
	}
	// A copy, so that the entry does not keep the request's memory alive.
	v.m[strings.Clone(raw)] = e
}
