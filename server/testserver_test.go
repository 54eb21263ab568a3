package server

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"sync"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// world is a test facility: a running server over a fresh database, one user per
// role, two projects (the researcher's own and a foreign one), an instrument, and
// an agent token for it.
type world struct {
	t       testing.TB
	srv     *Server
	http    *httptest.Server
	db      *postgres.DB
	key     ed25519.PrivateKey
	clock   *testClock
	users   map[accounts.Role]accounts.User
	tokens  map[accounts.Role]string // access tokens per role
	other   accounts.User            // a second researcher, member of the foreign project only
	own     accounts.Project         // the researcher's project
	foreign accounts.Project         // a project the researcher is not in
	instr   scheduling.Instrument
	agent   string // agent token secret for instr with every scope
	agentID string
}

const testPassword = "correct horse battery staple"

// testClock is a settable clock shared by the server and the test.
type testClock struct {
	mu  sync.Mutex
	now time.Time
}

func (c *testClock) Now() time.Time { c.mu.Lock(); defer c.mu.Unlock(); return c.now }
func (c *testClock) Advance(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.now = c.now.Add(d)
}

// testConfig is a valid configuration with a fresh signing key.
func testConfig(dbURL string) (Config, ed25519.PrivateKey) {
	_, key, err := ed25519.GenerateKey(nil)
	if err != nil {
		panic(err)
	}
	cfg := Defaults()
	cfg.DatabaseURL = dbURL
	cfg.SigningKey = key
	cfg.ObjectDir = os.TempDir()
	_, ledgerKey, err := ed25519.GenerateKey(nil)
	if err != nil {
		panic(err)
	}
	cfg.LedgerKey = ledgerKey
	return cfg, key
}

func newWorld(t testing.TB) *world {
	t.Helper()
	return newWorldPool(t, 8)
}

// newWorldPool is newWorld over a pool of maxConns database connections.
func newWorldPool(t testing.TB, maxConns int32) *world {
	t.Helper()
	return newWorldOn(t, pgtest.OpenPool(t, maxConns))
}

// newWorldOn is newWorld over a migrated database the caller provides.
func newWorldOn(t testing.TB, db *postgres.DB) *world {
	t.Helper()
	cfg, key := testConfig("postgres://unused")
	cfg.ObjectDir = t.TempDir()
	// A low-cost hash keeps the suite fast; the production parameters are tested in accounts.
	w := &world{t: t, db: db, key: key, clock: &testClock{now: time.Now().UTC().Truncate(time.Second)},
		users: map[accounts.Role]accounts.User{}, tokens: map[accounts.Role]string{}}
	log := slog.New(slog.NewJSONHandler(io.Discard, nil))
	if testing.Verbose() {
		log = slog.New(slog.NewJSONHandler(os.Stderr, nil))
	}
	srv, err := New(cfg, db, log, w.clock.Now)
	if err != nil {
		t.Fatalf("new server: %v", err)
	}
	w.srv = srv
	w.http = httptest.NewServer(srv.Handler())
	t.Cleanup(w.http.Close)
	ctx := context.Background()
	if _, err := db.SetFacility(ctx, scheduling.Facility{Name: "Test Facility", TimeZone: "Europe/Berlin", Currency: "EUR"}); err != nil {
		t.Fatal(err)
	}
	for _, r := range accounts.Roles {
		w.users[r] = w.createUser(string(r)+"@test.example", r)
	}
	w.other = w.createUser("other@test.example", accounts.RoleResearcher)
	w.own = w.createProject("OWN-1", w.users[accounts.RoleResearcher].ID)
	w.foreign = w.createProject("FOREIGN-1", w.other.ID)
	in := scheduling.Instrument{Code: "STEM-T", Name: "Test STEM", Kind: scheduling.KindSTEM, Bookable: true,
		AcceleratingVoltagesV: []float64{300e3}, Corrector: scheduling.CorrectorProbe}
	if w.instr, err = db.CreateInstrument(ctx, in, "setup", time.Now()); err != nil {
		t.Fatal(err)
	}
	secret, hash, err := accounts.NewOpaqueToken(accounts.AgentTokenPrefix)
	if err != nil {
		t.Fatal(err)
	}
	tok, err := db.CreateAgentToken(ctx, accounts.NewAgentToken{InstrumentID: w.instr.ID, Name: "acq-pc", Scopes: accounts.Scopes},
		w.users[accounts.RoleManager].ID, hash)
	if err != nil {
		t.Fatal(err)
	}
	w.agent, w.agentID = secret, tok.ID
	for _, r := range accounts.Roles {
		w.tokens[r] = w.login(w.users[r].Email, testPassword).AccessToken
	}
	return w
}

var (
	hashOnce   sync.Once
	sharedHash string
)

// passwordHash hashes testPassword once per test binary.
func passwordHash(t testing.TB) string {
	hashOnce.Do(func() {
		h, err := accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), 1).Hash(context.Background(), testPassword)
		if err != nil {
			t.Fatal(err)
		}
		sharedHash = h
	})
	return sharedHash
}

func (w *world) createUser(email string, role accounts.Role) accounts.User {
	w.t.Helper()
	u, err := w.db.CreateUser(context.Background(), accounts.NewUser{Email: email, DisplayName: email, Role: role}, passwordHash(w.t))
	if err != nil {
		w.t.Fatal(err)
	}
	return u
}

func (w *world) createProject(code, pi string) accounts.Project {
	w.t.Helper()
	p, err := w.db.CreateProject(context.Background(), accounts.NewProject{Code: code, Title: "Project " + code, PrincipalInvestigatorID: pi, RateClass: accounts.RateInternal})
	if err != nil {
		w.t.Fatal(err)
	}
	return p
}

func (w *world) login(email, password string) tokenResponse {
	w.t.Helper()
	var out tokenResponse
	res := w.do(http.MethodPost, "/api/v1/auth/login", "", map[string]string{"email": email, "password": password}, &out)
	if res.StatusCode != http.StatusOK {
		w.t.Fatalf("login %s: status %d", email, res.StatusCode)
	}
	return out
}

// response is a finished request: status, headers and the raw body.
type response struct {
	StatusCode int
	Header     http.Header
	Body       []byte
}

// do sends a JSON request with an optional bearer token and decodes a JSON answer
// into out (when non-nil and the status is 2xx).
func (w *world) do(method, path, token string, body any, out any) response {
	w.t.Helper()
	var rd io.Reader
	if body != nil {
		b, err := json.Marshal(body)
		if err != nil {
			w.t.Fatal(err)
		}
		rd = bytes.NewReader(b)
	}
	req, err := http.NewRequest(method, w.http.URL+path, rd)
	if err != nil {
		w.t.Fatal(err)
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	return w.send(req, out)
}

// errorCode extracts error.code from an error answer.
func (r response) errorCode() string {
	var e errorBody
	_ = json.Unmarshal(r.Body, &e)
	return e.Error.Code
}

// fieldNamed reports whether an error answer names field in error.fields.
func fieldNamed(r response, field string) bool {
	var e errorBody
	_ = json.Unmarshal(r.Body, &e)
	_, ok := e.Error.Fields[field]
	return ok
}
