package server

import (
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"log/slog"
	"net/http"
	"strings"
	"sync"
	"testing"

	"github.com/labstack/echo/v4"

	"beamledger/accounts"
)

// rawDo sends a request without recording it for the OpenAPI check (for routes that
// exist only in a test).
func rawDo(t *testing.T, w *world, req *http.Request) response {
	t.Helper()
	res, err := w.http.Client().Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	b, _ := io.ReadAll(res.Body)
	return response{StatusCode: res.StatusCode, Header: res.Header, Body: b}
}

// lockedBuffer collects log output written from server goroutines.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

func TestInternalErrorsLeakNothingAndPanicsAreRecovered(t *testing.T) {
	w := newWorld(t)
	logs := &lockedBuffer{}
	w.srv.log = slog.New(slog.NewJSONHandler(logs, nil))
	secret := `ERROR: relation "users" does not exist at /srv/beamledger/storage/postgres/users.go:42`
	w.srv.echo.GET("/test/fail", func(echo.Context) error { return errors.New(secret) }, w.srv.authorize(open()))
	w.srv.echo.GET("/test/panic", func(echo.Context) error { panic("boom at /srv/secret/path.go") }, w.srv.authorize(open()))
	for _, path := range []string{"/test/fail", "/test/panic"} {
		req, _ := http.NewRequest(http.MethodGet, w.http.URL+path, nil)
		r := rawDo(t, w, req)
		if r.StatusCode != 500 || r.errorCode() != "internal" {
			t.Fatalf("%s: %d %s", path, r.StatusCode, r.Body)
		}
		for _, leak := range []string{"relation", "users.go", "/srv/", "boom", "goroutine"} {
			if strings.Contains(string(r.Body), leak) {
				t.Fatalf("%s: 500 body leaks %q: %s", path, leak, r.Body)
			}
		}
		var body errorBody
		_ = json.Unmarshal(r.Body, &body)
		if body.Error.RequestID == "" || body.Error.RequestID != r.Header.Get("X-Request-Id") {
			t.Fatalf("%s: request id %q vs header %q", path, body.Error.RequestID, r.Header.Get("X-Request-Id"))
		}
		// The full error is in the log, under the same request id.
		if !strings.Contains(logs.String(), body.Error.RequestID) {
			t.Fatalf("%s: log lacks request id %s", path, body.Error.RequestID)
		}
	}
	// The process survived the panic.
	if r := w.do(http.MethodGet, "/healthz", "", nil, nil); r.StatusCode != 200 {
		t.Fatalf("healthz after panic: %d", r.StatusCode)
	}
}

func TestOneLogLinePerRequest(t *testing.T) {
	w := newWorld(t)
	logs := &lockedBuffer{}
	w.srv.log = slog.New(slog.NewJSONHandler(logs, nil))
	token := w.tokens[accounts.RoleStaff]
	r := w.do(http.MethodGet, "/api/v1/projects/"+w.own.ID, token, nil, nil)
	if r.StatusCode != 200 {
		t.Fatalf("status %d", r.StatusCode)
	}
	lines := strings.Split(strings.TrimSpace(logs.String()), "\n")
	if len(lines) != 1 {
		t.Fatalf("want one log line, got %d: %s", len(lines), logs.String())
	}
	var entry map[string]any
	if err := json.Unmarshal([]byte(lines[0]), &entry); err != nil {
		t.Fatal(err)
	}
	want := map[string]any{"method": "GET", "route": "/api/v1/projects/:project_id", "status": float64(200),
		"principal": w.users[accounts.RoleStaff].ID, "request_id": r.Header.Get("X-Request-Id")}
	for k, v := range want {
		if entry[k] != v {
			t.Errorf("log %s = %v, want %v", k, entry[k], v)
		}
	}
	if _, ok := entry["duration"]; !ok {
		t.Error("log lacks duration")
	}
}

func TestRequestIDFromProxyIsKeptOnlyWhenWellFormed(t *testing.T) {
	w := newWorld(t)
	for id, keep := range map[string]bool{"proxy-abc-12345": true, "bad id with spaces": false, "<script>": false} {
		req, _ := http.NewRequest(http.MethodGet, w.http.URL+"/healthz", nil)
		req.Header.Set("X-Request-Id", id)
		r := rawDo(t, w, req)
		if got := r.Header.Get("X-Request-Id"); (got == id) != keep || got == "" {
			t.Errorf("incoming %q → %q (keep %v)", id, got, keep)
		}
	}
}

func TestBodyLimitAndStrictJSON(t *testing.T) {
	w := newWorld(t)
	manager := w.tokens[accounts.RoleManager]
	big := map[string]string{"email": "x@test.example", "display_name": strings.Repeat("a", int(w.srv.cfg.MaxBodyBytes)), "role": "staff", "password": testPassword}
	if r := w.do(http.MethodPost, "/api/v1/users", manager, big, nil); r.StatusCode != 413 || r.errorCode() != "too_large" {
		t.Fatalf("oversized body: %d %s", r.StatusCode, r.Body)
	}
	// A body without Content-Length (chunked) is cut off at the limit too.
	pr, pw := io.Pipe()
	go func() {
		pw.Write([]byte(`{"email":"y@test.example","display_name":"`))
		pw.Write(bytes.Repeat([]byte("a"), int(w.srv.cfg.MaxBodyBytes)))
		pw.Write([]byte(`"}`))
		pw.Close()
	}()
	req, _ := http.NewRequest(http.MethodPost, w.http.URL+"/api/v1/users", pr)
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("Authorization", "Bearer "+manager)
	if r := rawDo(t, w, req); r.StatusCode != 413 {
		t.Fatalf("chunked oversized body: %d %s", r.StatusCode, r.Body)
	}
	r := w.do(http.MethodPost, "/api/v1/users", manager, map[string]any{"email": "z@test.example", "rolee": "manager"}, nil)
	if r.StatusCode != 400 || !strings.Contains(string(r.Body), `"rolee"`) {
		t.Fatalf("unknown field: %d %s", r.StatusCode, r.Body)
	}
	r = w.do(http.MethodPost, "/api/v1/users", manager, map[string]any{"email": 7}, nil)
	if r.StatusCode != 400 || !strings.Contains(string(r.Body), `"email"`) {
		t.Fatalf("wrong type: %d %s", r.StatusCode, r.Body)
	}
	r = w.do(http.MethodPost, "/api/v1/users", manager, map[string]any{"email": "Bad", "display_name": "", "role": "boss", "password": "short", "orcid": "0000-0002-1825-0098"}, nil)
	var e errorBody
	_ = json.Unmarshal(r.Body, &e)
	for _, f := range []string{"email", "display_name", "role", "password", "orcid"} {
		if e.Error.Fields[f] == "" {
			t.Errorf("invalid user: field %s not named in %s", f, r.Body)
		}
	}
}

func TestSecurityHeaders(t *testing.T) {
	w := newWorld(t)
	r := w.do(http.MethodGet, "/signin", "", nil, nil)
	if r.StatusCode != 200 || !strings.Contains(string(r.Body), "Test Facility") {
		t.Fatalf("sign-in page: %d", r.StatusCode)
	}
	for h, want := range map[string]string{"X-Content-Type-Options": "nosniff", "X-Frame-Options": "DENY"} {
		if got := r.Header.Get(h); got != want {
			t.Errorf("%s = %q", h, got)
		}
	}
	if !strings.Contains(r.Header.Get("Content-Security-Policy"), "default-src 'self'") {
		t.Errorf("CSP %q", r.Header.Get("Content-Security-Policy"))
	}
}
