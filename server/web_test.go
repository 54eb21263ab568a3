package server

import (
	"bytes"
	"encoding/json"
	"net/http"
	"regexp"
	"strings"
	"testing"
	"time"

	"beamledger/accounts"
)

// browser is a minimal cookie-keeping client for the session routes: it holds the
// cookies the server sets and sends them back, as a browser on the same origin does.
type browser struct {
	w       *world
	cookies map[string]*http.Cookie
}

func newBrowserClient(w *world) *browser { return &browser{w: w, cookies: map[string]*http.Cookie{}} }

// do sends a request with the browser's cookies and headers given as name, value pairs.
func (b *browser) do(method, path, contentType string, body []byte, header ...string) response {
	b.w.t.Helper()
	req, err := http.NewRequest(method, b.w.http.URL+path, bytes.NewReader(body))
	if err != nil {
		b.w.t.Fatal(err)
	}
	if contentType != "" {
		req.Header.Set("Content-Type", contentType)
	}
	req.Header.Set("Accept", "text/html,application/json")
	req.Header.Set("Sec-Fetch-Site", "same-origin")
	for i := 0; i+1 < len(header); i += 2 {
		req.Header.Set(header[i], header[i+1])
	}
	for _, k := range b.cookies {
		req.AddCookie(k)
	}
	c := b.w.http.Client()
	c.CheckRedirect = func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }
	res := b.w.rawDo(c, req)
	for _, k := range (&http.Response{Header: res.Header}).Cookies() {
		if k.MaxAge < 0 {
			delete(b.cookies, k.Name)
		} else {
			b.cookies[k.Name] = k
		}
	}
	return res
}

var csrfMeta = regexp.MustCompile(`<meta name="csrf-token" content="([^"]+)">`)

// csrf reads the token a page carries.
func csrfOf(t *testing.T, page response) string {
	t.Helper()
	m := csrfMeta.FindSubmatch(page.Body)
	if m == nil {
		t.Fatalf("the page carries no CSRF token: %.300s", page.Body)
	}
	return string(m[1])
}

// exerciseWeb covers the pages and the browser session: sign-in by form, the
// cookies' attributes, the CSRF check on cookie-authenticated writes, renewal and
// sign-out, and each page for a bearer-token client.
func exerciseWeb(t *testing.T, w *world) {
	researcher := w.users[accounts.RoleResearcher].Email
	// Pages answer people, refuse instrument agents, and ask for credentials.
	for _, p := range []string{"/", "/calendar", "/calendar?view=day", "/calendar?view=facility", "/acquire", "/files", "/statements", "/rates", "/ledger", "/trace", "/trace?sha256=" + strings.Repeat("ab", 32)} {
		if r := w.expect(http.StatusOK, http.MethodGet, p, w.tokens[accounts.RoleResearcher], nil, nil); !bytes.Contains(r.Body, []byte("Test Facility")) {
			t.Errorf("GET %s does not name the facility: %.200s", p, r.Body)
		}
		w.expect(http.StatusUnauthorized, http.MethodGet, p, "", nil, nil)
		w.expect(http.StatusForbidden, http.MethodGet, p, w.agent, nil, nil)
	}
	w.expect(http.StatusOK, http.MethodGet, "/reports", w.tokens[accounts.RoleAuditor], nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/reports", w.tokens[accounts.RoleResearcher], nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/qualifications", w.tokens[accounts.RoleStaff], nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/qualifications", w.tokens[accounts.RoleAuditor], nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/instruments", w.tokens[accounts.RoleAuditor], nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/instruments", w.tokens[accounts.RoleResearcher], nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/people", w.tokens[accounts.RoleAuditor], nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/people", w.tokens[accounts.RoleResearcher], nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/service", w.tokens[accounts.RoleStaff], nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/service", w.tokens[accounts.RoleAuditor], nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/calendar?date=31.12.2026", w.tokens[accounts.RoleStaff], nil, nil)

	b := newBrowserClient(w)
	if r := b.do(http.MethodGet, "/", "", nil); r.StatusCode != http.StatusSeeOther || r.Header.Get("Location") != "/signin" {
		t.Fatalf("a browser without a session should be sent to /signin: %d %q", r.StatusCode, r.Header.Get("Location"))
	}
	form := b.do(http.MethodGet, "/signin", "", nil)
	if form.StatusCode != http.StatusOK {
		t.Fatalf("GET /signin: %d", form.StatusCode)
	}
	checkCSP(t, form)
	token := csrfOf(t, form)
	signIn := func(password string, header ...string) response {
		body, _ := json.Marshal(map[string]string{"email": researcher, "password": password})
		return b.do(http.MethodPost, "/signin", "application/json", body, header...)
	}
	// Without the token, or from another site with it, sign-in is refused.
	if r := signIn(testPassword); r.StatusCode != http.StatusForbidden {
		t.Errorf("sign-in without the CSRF token: %d, want 403", r.StatusCode)
	}
	if r := signIn(testPassword, headerCSRF, token, "Sec-Fetch-Site", "cross-site"); r.StatusCode != http.StatusForbidden {
		t.Errorf("sign-in from another site: %d, want 403", r.StatusCode)
	}
	if r := signIn("not the password", headerCSRF, token); r.StatusCode != http.StatusUnauthorized || b.cookies[cookieAccess] != nil {
		t.Errorf("wrong password: %d %.200s", r.StatusCode, r.Body)
	}
	if r := signIn(testPassword, headerCSRF, token); r.StatusCode != http.StatusNoContent {
		t.Fatalf("sign-in: %d %.200s", r.StatusCode, r.Body)
	}
	for _, name := range []string{cookieAccess, cookieRefresh, cookieCSRF} {
		k := b.cookies[name]
		if k == nil {
			t.Fatalf("after sign-in the browser lacks cookie %s", name)
		}
		// Outside the demo every session cookie is Secure, and none is readable by scripts.
		if !k.HttpOnly || !k.Secure || k.SameSite == http.SameSiteDefaultMode || k.SameSite == http.SameSiteNoneMode {
			t.Errorf("cookie %s: HttpOnly %v Secure %v SameSite %v", name, k.HttpOnly, k.Secure, k.SameSite)
		}
	}
	if b.cookies[cookieRefresh].SameSite != http.SameSiteStrictMode {
		t.Errorf("the refresh cookie must be SameSite=Strict")
	}
	if r := b.do(http.MethodGet, "/signin", "", nil); r.StatusCode != http.StatusSeeOther {
		t.Errorf("the sign-in page should send a signed-in visitor on: %d", r.StatusCode)
	}
	page := b.do(http.MethodGet, "/", "", nil)
	if page.StatusCode != http.StatusOK || !bytes.Contains(page.Body, []byte(`id="viewer-role">researcher<`)) {
		t.Fatalf("overview with the session cookie: %d %.300s", page.StatusCode, page.Body)
	}
	if r := b.do(http.MethodGet, "/calendar", "", nil, "HX-Request", "true"); r.StatusCode != http.StatusOK || bytes.Contains(r.Body, []byte("<html")) ||
		!bytes.Contains(r.Body, []byte(`class="cal cal-week"`)) {
		t.Errorf("an htmx request should get the grid alone: %d %.200s", r.StatusCode, r.Body)
	}

	// The cookie is a credential for the API: reads need nothing more, writes need
	// the token and the same origin.
	if r := b.do(http.MethodGet, "/api/v1/me", "", nil); r.StatusCode != http.StatusOK {
		t.Errorf("GET /api/v1/me with the session cookie: %d", r.StatusCode)
	}
	if r := b.do(http.MethodPost, "/api/v1/me/feed-tokens", "", nil); r.StatusCode != http.StatusForbidden {
		t.Errorf("a cookie write without the CSRF token: %d, want 403", r.StatusCode)
	}
	if r := b.do(http.MethodPost, "/api/v1/me/feed-tokens", "", nil, headerCSRF, "forged"+token); r.StatusCode != http.StatusForbidden {
		t.Errorf("a cookie write with a wrong CSRF token: %d, want 403", r.StatusCode)
	}
	if r := b.do(http.MethodPost, "/api/v1/me/feed-tokens", "", nil, headerCSRF, token, "Sec-Fetch-Site", "cross-site"); r.StatusCode != http.StatusForbidden {
		t.Errorf("a cookie write from another site: %d, want 403", r.StatusCode)
	}
	if r := b.do(http.MethodPost, "/api/v1/me/feed-tokens", "", nil, headerCSRF, token); r.StatusCode != http.StatusCreated {
		t.Errorf("a cookie write with the CSRF token: %d %s", r.StatusCode, r.Body)
	}

	// Renewal: an expired access cookie is replaced from the refresh cookie.
	if r := b.do(http.MethodPost, "/session/refresh", "", nil); r.StatusCode != http.StatusForbidden {
		t.Errorf("renewal without the CSRF token: %d, want 403", r.StatusCode)
	}
	before := b.cookies[cookieAccess].Value
	w.clock.Advance(w.srv.cfg.AccessTTL + 5*time.Minute) // past the allowance for clock skew
	if r := b.do(http.MethodGet, "/api/v1/me", "", nil); r.StatusCode != http.StatusUnauthorized {
		t.Errorf("an expired access cookie should be refused by the API: %d", r.StatusCode)
	}
	if r := b.do(http.MethodPost, "/session/refresh", "", nil, headerCSRF, token); r.StatusCode != http.StatusNoContent || b.cookies[cookieAccess].Value == before {
		t.Errorf("renewal: %d, cookie renewed %v", r.StatusCode, b.cookies[cookieAccess].Value != before)
	}
	w.clock.Advance(w.srv.cfg.AccessTTL + 5*time.Minute) // past the allowance for clock skew
	if r := b.do(http.MethodGet, "/files", "", nil); r.StatusCode != http.StatusOK {
		t.Errorf("a page opened with an expired access cookie should renew the session: %d", r.StatusCode)
	}

	// Sign-out ends the refresh family: the refresh cookie no longer renews anything.
	refresh := *b.cookies[cookieRefresh]
	if r := b.do(http.MethodPost, "/signout", "", nil); r.StatusCode != http.StatusForbidden {
		t.Errorf("sign-out without the CSRF token: %d, want 403", r.StatusCode)
	}
	if r := b.do(http.MethodPost, "/signout", "", nil, headerCSRF, token); r.StatusCode != http.StatusNoContent || b.cookies[cookieAccess] != nil {
		t.Errorf("sign-out: %d, access cookie left %v", r.StatusCode, b.cookies[cookieAccess] != nil)
	}
	b.cookies[cookieRefresh] = &refresh
	if r := b.do(http.MethodPost, "/session/refresh", "", nil, headerCSRF, token); r.StatusCode != http.StatusUnauthorized {
		t.Errorf("renewal after sign-out: %d, want 401", r.StatusCode)
	}
}

// checkCSP: scripts only from this origin, never inline, never eval.
func checkCSP(t *testing.T, r response) {
	t.Helper()
	csp := r.Header.Get("Content-Security-Policy")
	if !strings.Contains(csp, "default-src 'self'") || strings.Contains(csp, "unsafe-inline") || strings.Contains(csp, "unsafe-eval") {
		t.Errorf("Content-Security-Policy %q", csp)
	}
	if bytes.Contains(r.Body, []byte("<script>")) || bytes.Contains(r.Body, []byte(" onclick=")) {
		t.Errorf("the page has inline script: %.300s", r.Body)
	}
}

// TestWebSession runs the browser-session exercise on its own.
func TestWebSession(t *testing.T) {
	exerciseWeb(t, newWorld(t))
}
