package server

import (
	"net/http"
	"testing"

	"beamledger/accounts"
)

func TestLoginRefreshLogout(t *testing.T) {
	w := newWorld(t)
	tok := w.login("researcher@test.example", testPassword)
	if tok.TokenType != "Bearer" || tok.ExpiresIn != 900 || tok.RefreshToken == "" {
		t.Fatalf("token response %+v", tok)
	}
	var me accounts.User
	if r := w.do(http.MethodGet, "/api/v1/me", tok.AccessToken, nil, &me); r.StatusCode != 200 || me.Role != accounts.RoleResearcher {
		t.Fatalf("me: %d %+v", r.StatusCode, me)
	}
	var next tokenResponse
	if r := w.do(http.MethodPost, "/api/v1/auth/refresh", "", map[string]string{"refresh_token": tok.RefreshToken}, &next); r.StatusCode != 200 {
		t.Fatalf("refresh: %d %s", r.StatusCode, r.Body)
	}
	if next.RefreshToken == tok.RefreshToken {
		t.Fatal("refresh token did not rotate")
	}
	// A replay of the used token is refused and revokes the whole family.
	if r := w.do(http.MethodPost, "/api/v1/auth/refresh", "", map[string]string{"refresh_token": tok.RefreshToken}, nil); r.StatusCode != 401 {
		t.Fatalf("replayed refresh: %d", r.StatusCode)
	}
	if r := w.do(http.MethodPost, "/api/v1/auth/refresh", "", map[string]string{"refresh_token": next.RefreshToken}, nil); r.StatusCode != 401 {
		t.Fatalf("refresh after replay: %d, want the family revoked", r.StatusCode)
	}
	// Logout revokes the family of a fresh session.
	s2 := w.login("researcher@test.example", testPassword)
	if r := w.do(http.MethodPost, "/api/v1/auth/logout", "", map[string]string{"refresh_token": s2.RefreshToken}, nil); r.StatusCode != 204 {
		t.Fatalf("logout: %d", r.StatusCode)
	}
	if r := w.do(http.MethodPost, "/api/v1/auth/refresh", "", map[string]string{"refresh_token": s2.RefreshToken}, nil); r.StatusCode != 401 {
		t.Fatalf("refresh after logout: %d", r.StatusCode)
	}
}

func TestLoginWrongPasswordAndUnknownEmail(t *testing.T) {
	w := newWorld(t)
	for _, body := range []map[string]string{
		{"email": "researcher@test.example", "password": "wrong password here"},
		{"email": "nobody@test.example", "password": testPassword},
	} {
		r := w.do(http.MethodPost, "/api/v1/auth/login", "", body, nil)
		if r.StatusCode != 401 || r.errorCode() != "unauthorized" {
			t.Fatalf("%v: %d %s", body, r.StatusCode, r.Body)
		}
	}
	r := w.do(http.MethodPost, "/api/v1/auth/login", "", map[string]string{"email": "not-an-email", "password": "x"}, nil)
	if r.StatusCode != 400 {
		t.Fatalf("malformed email: %d", r.StatusCode)
	}
}

func TestLoginThrottlePerAccount(t *testing.T) {
	w := newWorld(t)
	bad := map[string]string{"email": "staff@test.example", "password": "wrong password here"}
	for i := 0; i < w.srv.cfg.LoginPerAccount.MaxFailures; i++ {
		if r := w.do(http.MethodPost, "/api/v1/auth/login", "", bad, nil); r.StatusCode != 401 {
			t.Fatalf("attempt %d: %d", i, r.StatusCode)
		}
	}
	// Locked now, even with the right password, until the window ends.
	good := map[string]string{"email": "staff@test.example", "password": testPassword}
	r := w.do(http.MethodPost, "/api/v1/auth/login", "", good, nil)
	if r.StatusCode != 429 || r.Header.Get("Retry-After") == "" || r.errorCode() != "rate_limited" {
		t.Fatalf("locked account: %d %q %s", r.StatusCode, r.Header.Get("Retry-After"), r.Body)
	}
	w.clock.Advance(w.srv.cfg.LoginPerAccount.Window)
	if r := w.do(http.MethodPost, "/api/v1/auth/login", "", good, nil); r.StatusCode != 200 {
		t.Fatalf("after the window: %d", r.StatusCode)
	}
}

func TestPasswordChangeAndDisableRevokeTokensAtOnce(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	old := w.login("researcher@test.example", testPassword)
	var fresh tokenResponse
	r := w.do(http.MethodPost, "/api/v1/me/password", researcher,
		map[string]string{"current_password": testPassword, "new_password": "a much longer new passphrase"}, &fresh)
	if r.StatusCode != 200 {
		t.Fatalf("change password: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodGet, "/api/v1/me", researcher, nil, nil); r.StatusCode != 401 {
		t.Fatalf("old access token after password change: %d", r.StatusCode)
	}
	if r := w.do(http.MethodPost, "/api/v1/auth/refresh", "", map[string]string{"refresh_token": old.RefreshToken}, nil); r.StatusCode != 401 {
		t.Fatalf("old refresh token after password change: %d", r.StatusCode)
	}
	if r := w.do(http.MethodGet, "/api/v1/me", fresh.AccessToken, nil, nil); r.StatusCode != 200 {
		t.Fatalf("new token: %d", r.StatusCode)
	}
	// Disabling by a manager stops the new token at once too.
	id := w.users[accounts.RoleResearcher].ID
	if r := w.do(http.MethodPatch, "/api/v1/users/"+id, w.tokens[accounts.RoleManager], map[string]any{"disabled": true}, nil); r.StatusCode != 200 {
		t.Fatalf("disable: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodGet, "/api/v1/me", fresh.AccessToken, nil, nil); r.StatusCode != 401 {
		t.Fatalf("disabled user's token: %d", r.StatusCode)
	}
	if r := w.do(http.MethodPost, "/api/v1/auth/login", "", map[string]string{"email": "researcher@test.example", "password": "a much longer new passphrase"}, nil); r.StatusCode != 401 {
		t.Fatalf("disabled user's login: %d", r.StatusCode)
	}
}

func TestPasswordChangeIsThrottled(t *testing.T) {
	w := newWorld(t)
	token := w.tokens[accounts.RoleResearcher]
	wrong := map[string]string{"current_password": "not the password at all", "new_password": "another long passphrase"}
	for i := 0; i < w.srv.cfg.LoginPerAccount.MaxFailures; i++ {
		if r := w.do(http.MethodPost, "/api/v1/me/password", token, wrong, nil); r.StatusCode != 400 {
			t.Fatalf("attempt %d: %d %s", i, r.StatusCode, r.Body)
		}
	}
	right := map[string]string{"current_password": testPassword, "new_password": "another long passphrase"}
	if r := w.do(http.MethodPost, "/api/v1/me/password", token, right, nil); r.StatusCode != 429 {
		t.Fatalf("after %d wrong current passwords: %d, want 429", w.srv.cfg.LoginPerAccount.MaxFailures, r.StatusCode)
	}
}
