package server

import (
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/golang-jwt/jwt/v5"

	"beamledger/accounts"
)

// TestVerifiedTokensWindow: a verified token is answered from the cache only while a
// full verification would pass too; outside that window (before iat less the leeway,
// from exp on) it is verified in full again, which refuses it past the leeway.
func TestVerifiedTokensWindow(t *testing.T) {
	clock := &testClock{now: time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC)}
	cfg, _ := testConfig("postgres://unused")
	s := newTokenSigner(cfg, clock.Now)
	raw, err := s.issue("3b241101-e2bb-4255-8caf-4136c566a962", 1, clock.Now())
	if err != nil {
		t.Fatal(err)
	}
	cached := func() bool { _, ok := s.verified.get(raw, clock.Now()); return ok }
	if _, err := s.parse(raw); err != nil || !cached() {
		t.Fatalf("fresh token: %v, cached %v", err, cached())
	}
	if c, err := s.parse(raw); err != nil || c.Subject != "3b241101-e2bb-4255-8caf-4136c566a962" {
		t.Fatalf("from the cache: %+v, %v", c, err)
	}
	// A changed token is another key: its bad signature is found.
	parts := strings.Split(raw, ".")
	if _, err := s.parse(parts[0] + "." + parts[1] + "." + flipFirstByte(t, parts[2])); err == nil {
		t.Fatal("a token with another signature was accepted")
	}
	// Before iat less the leeway (a clock set back), the cache does not answer and the
	// full check refuses.
	clock.Advance(-tokenLeeway - time.Second)
	if cached() {
		t.Error("the cache answers before iat less the leeway")
	}
	if _, err := s.parse(raw); err == nil {
		t.Error("a token used before it was issued was accepted")
	}
	clock.Advance(tokenLeeway + time.Second)
	// At exp the cache stops answering; the full check accepts within the leeway only.
	clock.Advance(cfg.AccessTTL)
	if cached() {
		t.Error("the cache answers at exp")
	}
	if _, err := s.parse(raw); err != nil {
		t.Errorf("inside the leeway after exp: %v", err)
	}
	clock.Advance(tokenLeeway)
	if _, err := s.parse(raw); err == nil {
		t.Error("an expired token was accepted")
	}
}

// TestVerifiedTokensBound: a full cache drops expired entries first, then starts afresh.
func TestVerifiedTokensBound(t *testing.T) {
	clock := &testClock{now: time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC)}
	cfg, _ := testConfig("postgres://unused")
	cfg.AccessTTL = time.Minute
	s := newTokenSigner(cfg, clock.Now)
	for i := 0; i < maxVerifiedTokens; i++ {
		claims := &accessClaims{TokenVersion: 1}
		claims.Subject = "u"
		claims.ExpiresAt = jwt.NewNumericDate(clock.Now().Add(time.Duration(1+i%2) * time.Minute))
		s.verified.put(fmt.Sprintf("token-%d", i), claims, tokenLeeway, clock.Now())
	}
	if len(s.verified.m) != maxVerifiedTokens {
		t.Fatalf("%d entries", len(s.verified.m))
	}
	clock.Advance(90 * time.Second) // half the entries have expired
	raw, _ := s.issue("u2", 1, clock.Now())
	if _, err := s.parse(raw); err != nil {
		t.Fatal(err)
	}
	if n := len(s.verified.m); n != maxVerifiedTokens/2+1 {
		t.Errorf("%d entries after dropping the expired ones, want %d", n, maxVerifiedTokens/2+1)
	}
}

// TestCachedTokenStillChecksAccount: a token the server has verified and cached is
// still refused once its user is disabled or their password reset, at once on the
// server that made the change and within the account-state cache's bound on another.
func TestCachedTokenStillChecksAccount(t *testing.T) {
	w := newWorld(t)
	other := w.srv.cfg
	other.AuthCacheTTL = 50 * time.Millisecond
	w2 := alsoServe(t, w, other)
	id := w.users[accounts.RoleResearcher].ID
	tok := w.tokens[accounts.RoleResearcher]
	expectMe(t, w, tok)
	expectMe(t, w2, tok)
	for _, s := range []*Server{w.srv, w2.srv} {
		if _, ok := s.tokens.verified.get(tok, w.clock.Now()); !ok {
			t.Fatal("the token was not cached")
		}
	}
	if r := w.do(http.MethodPatch, "/api/v1/users/"+id, w.tokens[accounts.RoleManager], map[string]any{"disabled": true}, nil); r.StatusCode != http.StatusOK {
		t.Fatalf("disable: %d %s", r.StatusCode, r.Body)
	}
	expectUnauthorized(t, w, tok)
	time.Sleep(60 * time.Millisecond) // past the other server's account-state bound
	expectUnauthorized(t, w2, tok)

	// A password reset moves the token version on, which refuses a cached token too.
	staff, staffTok := w.users[accounts.RoleStaff].ID, w.tokens[accounts.RoleStaff]
	if r := w.do(http.MethodGet, "/api/v1/me", staffTok, nil, nil); r.StatusCode != http.StatusOK {
		t.Fatalf("staff: %d %s", r.StatusCode, r.Body)
	}
	if _, ok := w.srv.tokens.verified.get(staffTok, w.clock.Now()); !ok {
		t.Fatal("the staff token was not cached")
	}
	if r := w.do(http.MethodPost, "/api/v1/users/"+staff+"/password", w.tokens[accounts.RoleManager],
		map[string]string{"new_password": "a reset passphrase of length"}, nil); r.StatusCode != http.StatusNoContent {
		t.Fatalf("reset: %d %s", r.StatusCode, r.Body)
	}
	expectUnauthorized(t, w, staffTok)
}
