package server

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"mime"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/google/uuid"
	"github.com/santhosh-tekuri/jsonschema/v6"

	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres/pgtest"
)

// TestMain runs the tests, then holds every answer they received against
// openapi.yaml: the status must be documented for the operation, required headers
// present, the media type documented, and a JSON body valid against its schema. So
// the document is checked against what the server really sends, not only what we
// meant it to send.
func TestMain(m *testing.M) {
	code := m.Run()
	if code != 0 {
		os.Exit(code)
	}
	ex := recordedExchanges()
	if len(ex) == 0 {
		os.Exit(0)
	}
	if problems := validateExchanges(ex); len(problems) > 0 {
		fmt.Fprintf(os.Stderr, "FAIL: %d of %d answers recorded by the tests depart from openapi.yaml:\n", len(problems), len(ex))
		for _, p := range problems {
			fmt.Fprintln(os.Stderr, "  "+p)
		}
		os.Exit(1)
	}
	os.Exit(0)
}

// validateExchanges returns one line per recorded answer that the document does not
// describe.
func validateExchanges(ex []exchange) []string {
	d, err := loadAPIDoc()
	if err != nil {
		return []string{"openapi document: " + err.Error()}
	}
	var problems []string
	for _, e := range ex {
		if err := d.checkExchange(e); err != nil {
			body := e.Body
			if len(body) > 300 {
				body = append(body[:300:300], "..."...)
			}
			problems = append(problems, fmt.Sprintf("%s %s -> %d: %v\n    body: %s", e.Method, e.Path, e.Status,
				strings.ReplaceAll(err.Error(), "\n", "\n    "), body))
		}
	}
	return problems
}

// checkExchange reports how one answer departs from the document, or nil.
func (d *apiDoc) checkExchange(e exchange) error {
	// Answers to HEAD never have a body, whatever the document says of GET.
	head := e.Method == http.MethodHead
	op := d.operation(e.Method, e.Path)
	if op == nil {
		// Unknown paths and methods are answered by echo through our error handler.
		switch {
		case e.Status != http.StatusNotFound && e.Status != http.StatusMethodNotAllowed:
			return fmt.Errorf("no documented operation matches")
		case head:
			return nil
		}
		return d.checkJSON(e, "#/components/schemas/Error")
	}
	resp, ptr, ok, err := d.response(op, e.Status)
	if err != nil {
		return err
	}
	if !ok {
		return fmt.Errorf("status %d is not documented for %s %s (documented: %v)", e.Status, op.Method, op.Path, op.statuses())
	}
	var problems []error
	headers, _ := resp["headers"].(map[string]any)
	for _, name := range slices.Sorted(maps.Keys(headers)) {
		if err := d.checkHeader(e, name, headers[name], ptr+"/headers/"+escapePointer(name)); err != nil {
			problems = append(problems, err)
		}
	}
	content, _ := resp["content"].(map[string]any)
	if head {
		return errors.Join(problems...)
	}
	if len(content) == 0 {
		if len(e.Body) > 0 {
			problems = append(problems, fmt.Errorf("documented without a body, but %d bytes came", len(e.Body)))
		}
		return errors.Join(problems...)
	}
	mt, _, err := mime.ParseMediaType(e.Header.Get("Content-Type"))
	switch {
	case err != nil:
		problems = append(problems, fmt.Errorf("Content-Type %q: %v", e.Header.Get("Content-Type"), err))
	case content[mt] == nil && content["*/*"] == nil:
		problems = append(problems, fmt.Errorf("media type %s is not documented (documented: %v)", mt, slices.Sorted(maps.Keys(content))))
	case mt == "application/json":
		if err := d.checkJSON(e, ptr+"/content/application~1json/schema"); err != nil {
			problems = append(problems, err)
		}
	}
	return errors.Join(problems...)
}

// checkJSON validates the body against the schema at pointer.
func (d *apiDoc) checkJSON(e exchange, pointer string) error {
	sch, err := d.schema(pointer)
	if err != nil {
		return fmt.Errorf("schema %s: %w", pointer, err)
	}
	v, err := jsonschema.UnmarshalJSON(bytes.NewReader(e.Body))
	if err != nil {
		return fmt.Errorf("body is not JSON: %w", err)
	}
	if err := sch.Validate(v); err != nil {
		return fmt.Errorf("body does not match %s: %w", pointer, err)
	}
	return nil
}

// checkHeader requires a documented required header and validates its value.
func (d *apiDoc) checkHeader(e exchange, name string, h any, pointer string) error {
	hm, hptr, err := d.resolve(h, pointer)
	if err != nil {
		return err
	}
	value := e.Header.Get(name)
	if value == "" {
		if hm["required"] == true {
			return fmt.Errorf("required header %s is missing", name)
		}
		return nil
	}
	sch, err := d.schema(hptr + "/schema")
	if err != nil {
		return fmt.Errorf("header %s schema: %w", name, err)
	}
	var v any = value
	if s, _ := hm["schema"].(map[string]any); s["type"] == "integer" {
		if _, err := strconv.Atoi(value); err == nil {
			v = jsonNumber(value)
		}
	}
	if err := sch.Validate(v); err != nil {
		return fmt.Errorf("header %s: %q: %w", name, value, err)
	}
	return nil
}

// jsonNumber parses a decimal integer the way jsonschema.UnmarshalJSON would.
func jsonNumber(s string) any {
	v, err := jsonschema.UnmarshalJSON(strings.NewReader(s))
	if err != nil {
		return s
	}
	return v
}

// TestExchangeValidatorCatchesMismatches makes sure the TestMain check fails for
// answers the document does not describe, and passes for ones it does.
func TestExchangeValidatorCatchesMismatches(t *testing.T) {
	d, err := loadAPIDoc()
	if err != nil {
		t.Fatal(err)
	}
	jsonHeader := func(kv ...string) http.Header {
		h := http.Header{"Content-Type": {"application/json"}, "X-Request-Id": {"0123456789abcdef"}}
		for i := 0; i+1 < len(kv); i += 2 {
			h.Set(kv[i], kv[i+1])
		}
		return h
	}
	const user = `{"id":"0b6c5f8e-3f0e-4b1e-9d6a-0a4c6f1d2e3f","email":"ann@example.org","display_name":"Ann","role":"staff","disabled":false,"created_at":"2025-03-01T09:00:00Z","updated_at":"2025-03-01T09:00:00.123456Z"`
	const unauthorized = `{"error":{"code":"unauthorized","message":"sign in","request_id":"0123456789abcdef"}}`
	cases := []struct {
		name string
		ex   exchange
		ok   bool
	}{
		{"health", exchange{"GET", "/healthz", 200, jsonHeader(), []byte(`{"status":"ok"}`)}, true},
		{"user", exchange{"GET", "/api/v1/users/0b6c5f8e-3f0e-4b1e-9d6a-0a4c6f1d2e3f", 200, jsonHeader(), []byte(user + `}`)}, true},
		{"user with orcid", exchange{"GET", "/api/v1/me", 200, jsonHeader(), []byte(user + `,"orcid":"0000-0002-1694-233X"}`)}, true},
		{"unknown path answered 404", exchange{"GET", "/api/v1/nothing", 404, jsonHeader(), []byte(`{"error":{"code":"not_found","message":"Not Found","request_id":"x1234567"}}`)}, true},
		{"undocumented status", exchange{"GET", "/healthz", 500, jsonHeader(), []byte(`{"status":"ok"}`)}, false},
		{"missing required field", exchange{"GET", "/api/v1/me", 200, jsonHeader(), []byte(`{"id":"0b6c5f8e-3f0e-4b1e-9d6a-0a4c6f1d2e3f"}`)}, false},
		{"undocumented field", exchange{"GET", "/api/v1/me", 200, jsonHeader(), []byte(user + `,"password_hash":"x"}`)}, false},
		{"null for an omitted field", exchange{"GET", "/api/v1/me", 200, jsonHeader(), []byte(user + `,"orcid":null}`)}, false},
		{"email not normalised", exchange{"GET", "/api/v1/me", 200, jsonHeader(), []byte(strings.Replace(user, "ann@", "Ann@", 1) + `}`)}, false},
		{"id not a uuid", exchange{"GET", "/api/v1/me", 200, jsonHeader(), []byte(strings.Replace(user, "0b6c5f8e-", "0b6c5f8e", 1) + `}`)}, false},
		{"time not RFC 3339", exchange{"GET", "/api/v1/me", 200, jsonHeader(), []byte(strings.Replace(user, "2025-03-01T09:00:00Z", "2025-03-01 09:00", 1) + `}`)}, false},
		{"wrong media type", exchange{"GET", "/api/v1/me", 200, jsonHeader("Content-Type", "text/html"), []byte(user + `}`)}, false},
		{"error code for another status", exchange{"GET", "/api/v1/me", 403, jsonHeader(), []byte(unauthorized)}, false},
		{"401 with its header", exchange{"GET", "/api/v1/me", 401, jsonHeader("WWW-Authenticate", `Bearer realm="beamledger"`), []byte(unauthorized)}, true},
		{"401 without WWW-Authenticate", exchange{"GET", "/api/v1/me", 401, jsonHeader(), []byte(unauthorized)}, false},
		{"body on 204", exchange{"POST", "/api/v1/auth/logout", 204, jsonHeader(), []byte(`{}`)}, false},
		{"Retry-After not seconds", exchange{"POST", "/api/v1/auth/login", 429, jsonHeader("Retry-After", "soon"),
			[]byte(`{"error":{"code":"rate_limited","message":"later","request_id":"0123456789abcdef"}}`)}, false},
		{"Retry-After in seconds", exchange{"POST", "/api/v1/auth/login", 429, jsonHeader("Retry-After", "900"),
			[]byte(`{"error":{"code":"rate_limited","message":"later","request_id":"0123456789abcdef"}}`)}, true},
		{"no operation", exchange{"GET", "/api/v1/nothing", 200, jsonHeader(), []byte(`{}`)}, false},
		{"undocumented method", exchange{"DELETE", "/api/v1/me", 200, jsonHeader(), []byte(`{}`)}, false},
		{"HEAD answered 405 without a body", exchange{"HEAD", "/healthz", 405, http.Header{}, nil}, true},
		{"method not allowed", exchange{"DELETE", "/api/v1/me", 405, jsonHeader(), []byte(`{"error":{"code":"not_found","message":"Method Not Allowed","request_id":"x1234567"}}`)}, true},
		{"unknown path answered 404 with text", exchange{"GET", "/api/v1/nothing", 404, http.Header{"Content-Type": {"text/plain"}}, []byte("404 page not found")}, false},
	}
	for _, c := range cases {
		err := d.checkExchange(c.ex)
		if (err == nil) != c.ok {
			t.Errorf("%s: checkExchange = %v, want ok=%v", c.name, err, c.ok)
		}
	}
	if got := validateExchanges([]exchange{cases[0].ex, cases[4].ex}); len(got) != 1 {
		t.Errorf("validateExchanges reported %d problems, want 1: %q", len(got), got)
	}
}

// rawDo sends a request built by the caller (for headers w.do does not set) and
// records the answer like w.do does.
func (w *world) rawDo(c *http.Client, req *http.Request) response {
	w.t.Helper()
	res, err := c.Do(req)
	if err != nil {
		w.t.Fatal(err)
	}
	defer res.Body.Close()
	b, err := io.ReadAll(res.Body)
	if err != nil {
		w.t.Fatal(err)
	}
	recordExchange(req.Method, req.URL.RequestURI(), req, res, b)
	return response{StatusCode: res.StatusCode, Header: res.Header, Body: b}
}

// expect is w.do that fails the test unless the answer has the status wanted.
func (w *world) expect(want int, method, path, token string, body, out any) response {
	w.t.Helper()
	r := w.do(method, path, token, body, out)
	if r.StatusCode != want {
		w.t.Errorf("%s %s: status %d, want %d; body %s", method, path, r.StatusCode, want, r.Body)
	}
	return r
}

// TestOpenAPIExamplesExercise calls every route at least once with success and at
// least once with a representative error, so that TestMain holds an answer of every
// documented success status of every operation against the document.
func TestOpenAPIExamplesExercise(t *testing.T) {
	d, err := loadAPIDoc()
	if err != nil {
		t.Fatal(err)
	}
	start := len(recordedExchanges())
	w := newWorld(t)
	exerciseOperations(t, w)
	exerciseSignIn(t, w)
	exerciseUsers(t, w)
	exerciseProjects(t, w)
	exerciseInstruments(t, w)
	exerciseInstrumentBookable(t, w)
	exerciseInstrumentCapabilities(t, w)
	exerciseBookings(t, w)
	exerciseUsage(t, w)
	exerciseFeeds(t, w)
	exerciseSeries(t, w)
	exerciseQuotas(t, w)
	exerciseWaitlist(t, w)
	exerciseBookingRules(t, w)
	exerciseAcquisitions(t, w)
	exerciseFiles(t, w)
	exerciseLedger(t, w)
	exerciseTrace(t, w)
	exerciseUploads(t, w)
	exerciseBilling(t, w)
	exerciseWeb(t, w)

	// Every documented 2xx of every operation, and some error of each operation that
	// documents errors, must have been seen.
	seen := map[*apiOperation]map[int]bool{}
	for _, e := range recordedExchanges()[start:] {
		if op := d.operation(e.Method, e.Path); op != nil {
			if seen[op] == nil {
				seen[op] = map[int]bool{}
			}
			seen[op][e.Status] = true
		}
	}
	for _, op := range d.ops {
		var documentsErrors, sawError bool
		for _, s := range op.statuses() {
			if s/100 == 2 && !seen[op][s] {
				t.Errorf("%s %s: documented %d never exercised", op.Method, op.Path, s)
			}
			documentsErrors = documentsErrors || s >= 400
		}
		for s := range seen[op] {
			sawError = sawError || s >= 400
		}
		if documentsErrors && !sawError {
			t.Errorf("%s %s: no error answer exercised", op.Method, op.Path)
		}
	}
}

// exerciseOperations covers the routes outside /api/v1: probes, the document, the web.
func exerciseOperations(t *testing.T, w *world) {
	w.expect(http.StatusOK, http.MethodGet, "/healthz", "", nil, nil)
	var ready readiness
	w.expect(http.StatusOK, http.MethodGet, "/readyz", "", nil, &ready)
	if ready.Status != "ready" || ready.SchemaVersion != ready.SchemaKnown || ready.SchemaKnown < 1 {
		t.Errorf("readiness %+v", ready)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/openapi.json", "", nil, nil)

	// A server whose database is gone is alive but not ready.
	cfg, _ := testConfig("postgres://unused")
	db := pgtest.Open(t)
	db.Close()
	down, err := New(cfg, db, w.srv.log, w.clock.Now)
	if err != nil {
		t.Fatal(err)
	}
	downHTTP := httptest.NewServer(down.Handler())
	defer downHTTP.Close()
	dw := &world{t: t, http: downHTTP}
	dw.expect(http.StatusOK, http.MethodGet, "/healthz", "", nil, nil)
	if r := dw.expect(http.StatusServiceUnavailable, http.MethodGet, "/readyz", "", nil, nil); !bytes.Contains(r.Body, []byte(`"unreachable"`)) {
		t.Errorf("readyz with the database gone: %s", r.Body)
	}

	get := func(path string, header ...string) response {
		req, err := http.NewRequest(http.MethodGet, w.http.URL+path, nil)
		if err != nil {
			t.Fatal(err)
		}
		for i := 0; i+1 < len(header); i += 2 {
			req.Header.Set(header[i], header[i+1])
		}
		return w.rawDo(w.http.Client(), req)
	}
	checks := []struct {
		path, rangeHeader string
		status            int
		mediaPrefix       string
	}{
		{"/static/beamledger.css", "", http.StatusOK, "text/css"},
		{"/static/start.js", "", http.StatusOK, ""},
		{"/static/beamledger.css", "bytes=0-15", http.StatusPartialContent, "text/css"},
		{"/static/no-such-file.css", "", http.StatusNotFound, "text/plain"},
	}
	for _, c := range checks {
		var r response
		if c.rangeHeader != "" {
			r = get(c.path, "Range", c.rangeHeader)
		} else {
			r = get(c.path)
		}
		if r.StatusCode != c.status || !strings.HasPrefix(r.Header.Get("Content-Type"), c.mediaPrefix) {
			t.Errorf("GET %s (Range %q): %d %q, want %d %s", c.path, c.rangeHeader, r.StatusCode, r.Header.Get("Content-Type"), c.status, c.mediaPrefix)
		}
	}
}

// exerciseSignIn covers sign-in, renewal and sign-out, and the body checks every
// JSON operation shares (unknown field, wrong media type, too large).
func exerciseSignIn(t *testing.T, w *world) {
	const login, refresh, logout = "/api/v1/auth/login", "/api/v1/auth/refresh", "/api/v1/auth/logout"
	staff := w.users[accounts.RoleStaff].Email
	var tok, next tokenResponse
	w.expect(http.StatusOK, http.MethodPost, login, "", map[string]string{"email": staff, "password": testPassword}, &tok)
	w.expect(http.StatusUnauthorized, http.MethodPost, login, "", map[string]string{"email": staff, "password": "wrong password here"}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, login, "", map[string]string{"email": "not-an-email", "password": "x"}, nil)
	r := w.expect(http.StatusBadRequest, http.MethodPost, login, "", map[string]any{"email": staff, "password": testPassword, "remember": true}, nil)
	if !bytes.Contains(r.Body, []byte(`"remember"`)) {
		t.Errorf("unknown field not named: %s", r.Body)
	}

	req, err := http.NewRequest(http.MethodPost, w.http.URL+login, strings.NewReader("email=a&password=b"))
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	if r := w.rawDo(w.http.Client(), req); r.StatusCode != http.StatusUnsupportedMediaType {
		t.Errorf("form body: %d %s", r.StatusCode, r.Body)
	}
	// Announce a body over the limit and wait for 100 Continue, which never comes: the
	// server answers from the Content-Length alone.
	big := bytes.Repeat([]byte(" "), int(w.srv.cfg.MaxBodyBytes)+1)
	req, err = http.NewRequest(http.MethodPost, w.http.URL+login, bytes.NewReader(big))
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("Expect", "100-continue")
	tr := w.http.Client().Transport.(*http.Transport).Clone()
	tr.ExpectContinueTimeout = time.Minute
	defer tr.CloseIdleConnections()
	if r := w.rawDo(&http.Client{Transport: tr}, req); r.StatusCode != http.StatusRequestEntityTooLarge {
		t.Errorf("oversized body: %d %s", r.StatusCode, r.Body)
	}

	w.expect(http.StatusOK, http.MethodPost, refresh, "", map[string]string{"refresh_token": tok.RefreshToken}, &next)
	w.expect(http.StatusUnauthorized, http.MethodPost, refresh, "", map[string]string{"refresh_token": "blrefresh_" + strings.Repeat("A", 43)}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, refresh, "", map[string]string{"refresh_token": next.AccessToken}, nil)
	w.expect(http.StatusNoContent, http.MethodPost, logout, "", map[string]string{"refresh_token": next.RefreshToken}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, logout, "", map[string]string{}, nil)
	w.expect(http.StatusUnauthorized, http.MethodPost, refresh, "", map[string]string{"refresh_token": next.RefreshToken}, nil)

	var me accounts.User
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/me", w.tokens[accounts.RoleResearcher], nil, &me)
	if me.ID != w.users[accounts.RoleResearcher].ID || me.ORCID != "" {
		t.Errorf("me: %+v", me)
	}
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/me", "", nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/api/v1/me", w.agent, nil, nil)

	var f scheduling.Facility
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/facility", w.tokens[accounts.RoleAuditor], nil, &f)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/facility", w.agent, nil, nil)
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/facility", "not.a.jwt", nil, nil)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/facility", w.tokens[accounts.RoleManager], f, nil)
	w.expect(http.StatusBadRequest, http.MethodPut, "/api/v1/facility", w.tokens[accounts.RoleManager], map[string]string{"name": "X"}, nil)
	w.expect(http.StatusForbidden, http.MethodPut, "/api/v1/facility", w.tokens[accounts.RoleStaff], f, nil)
	if f.TimeZone != "Europe/Berlin" || f.Currency != "EUR" {
		t.Errorf("facility %+v", f)
	}
}

// exerciseUsers covers users, password resets and changing one's own password.
func exerciseUsers(t *testing.T, w *world) {
	manager, staff, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher]
	managerID, researcherID := w.users[accounts.RoleManager].ID, w.users[accounts.RoleResearcher].ID
	newUser := map[string]any{"email": "Ann.Lee@Example.org", "display_name": "Ann Lee", "role": "researcher",
		"orcid": "https://orcid.org/0000-0002-1825-0097", "password": testPassword}
	var ann accounts.User
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/users", manager, newUser, &ann)
	if ann.Email != "ann.lee@example.org" || ann.ORCID != "0000-0002-1825-0097" {
		t.Errorf("created user %+v", ann)
	}
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/users", manager, newUser, nil)
	w.expect(http.StatusForbidden, http.MethodPost, "/api/v1/users", staff, newUser, nil)
	typo := map[string]any{"email": "bo@example.org", "display_name": "Bo", "rolee": "staff", "password": testPassword}
	if r := w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/users", manager, typo, nil); !bytes.Contains(r.Body, []byte(`"rolee"`)) {
		t.Errorf("typo not named: %s", r.Body)
	}

	var researchers list[accounts.User]
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/users?role=researcher&include_disabled=true", w.tokens[accounts.RoleAuditor], nil, &researchers)
	if len(researchers.Items) != 3 {
		t.Errorf("researchers: %d, want 3", len(researchers.Items))
	}
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/users?role=superuser", manager, nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, "/api/v1/users", researcher, nil, nil)

	annPath := "/api/v1/users/" + ann.ID
	w.expect(http.StatusOK, http.MethodGet, annPath, staff, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, annPath, researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/users/not-a-uuid", manager, nil, nil)

	var changed accounts.User
	w.expect(http.StatusOK, http.MethodPatch, annPath, manager, map[string]any{"display_name": "Ann M. Lee", "orcid": "", "role": "staff"}, &changed)
	if changed.ORCID != "" || changed.Role != accounts.RoleStaff {
		t.Errorf("patched user %+v", changed)
	}
	w.expect(http.StatusOK, http.MethodPatch, "/api/v1/users/"+researcherID, researcher, map[string]any{"orcid": "0000-0001-5109-3700"}, nil)
	w.expect(http.StatusForbidden, http.MethodPatch, "/api/v1/users/"+researcherID, researcher, map[string]any{"role": "manager"}, nil)
	w.expect(http.StatusNotFound, http.MethodPatch, "/api/v1/users/"+managerID, researcher, map[string]any{"display_name": "X"}, nil)
	w.expect(http.StatusConflict, http.MethodPatch, "/api/v1/users/"+managerID, manager, map[string]any{"role": "staff"}, nil)
	w.expect(http.StatusBadRequest, http.MethodPatch, annPath, manager, map[string]any{}, nil)

	const resetTo = "a new passphrase from the manager"
	w.expect(http.StatusNoContent, http.MethodPost, annPath+"/password", manager, map[string]string{"new_password": resetTo}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, annPath+"/password", manager, map[string]string{"new_password": "short"}, nil)
	w.expect(http.StatusNotFound, http.MethodPost, "/api/v1/users/"+uuid.NewString()+"/password", manager, map[string]string{"new_password": resetTo}, nil)
	w.expect(http.StatusForbidden, http.MethodPost, annPath+"/password", staff, map[string]string{"new_password": resetTo}, nil)

	annTok := w.login(ann.Email, resetTo)
	var fresh tokenResponse
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/me/password", annTok.AccessToken,
		map[string]string{"current_password": resetTo, "new_password": "a passphrase only Ann knows"}, &fresh)
	w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/me/password", fresh.AccessToken,
		map[string]string{"current_password": resetTo, "new_password": "whatever it may be"}, nil)
	w.expect(http.StatusUnauthorized, http.MethodPost, "/api/v1/me/password", annTok.AccessToken,
		map[string]string{"current_password": resetTo, "new_password": "whatever it may be"}, nil)
}

// exerciseProjects covers projects and their members.
func exerciseProjects(t *testing.T, w *world) {
	manager, staff, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher]
	researcherID := w.users[accounts.RoleResearcher].ID
	newProject := map[string]any{"code": "em-2025-014", "title": "Beam damage in metal-organic frameworks",
		"principal_investigator_id": w.other.ID, "rate_class": "external_academic"}
	var p accounts.Project
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects", manager, newProject, &p)
	if p.Code != "EM-2025-014" || !slices.Equal(p.MemberIDs, []string{w.other.ID}) {
		t.Errorf("created project %+v", p)
	}
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/projects", manager, newProject, nil)
	w.expect(http.StatusForbidden, http.MethodPost, "/api/v1/projects", researcher, newProject, nil)
	noPI := map[string]any{"code": "EM-2025-015", "title": "T", "principal_investigator_id": uuid.NewString(), "rate_class": "internal"}
	w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/projects", manager, noPI, nil)

	var mine list[accounts.Project]
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/projects", researcher, nil, &mine)
	if len(mine.Items) != 1 || mine.Items[0].ID != w.own.ID {
		t.Errorf("researcher's projects: %+v", mine.Items)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/projects", w.tokens[accounts.RoleAuditor], nil, nil)
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/projects", "", nil, nil)

	pPath := "/api/v1/projects/" + p.ID
	w.expect(http.StatusOK, http.MethodGet, pPath, staff, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/projects/"+w.foreign.ID, researcher, nil, nil)
	w.expect(http.StatusOK, http.MethodPatch, pPath, manager, map[string]any{"title": "Beam damage in MOFs", "rate_class": "commercial"}, nil)
	w.expect(http.StatusBadRequest, http.MethodPatch, pPath, manager, map[string]any{"rate_class": "free"}, nil)
	w.expect(http.StatusNotFound, http.MethodPatch, "/api/v1/projects/"+uuid.NewString(), manager, map[string]any{"title": "T"}, nil)
	w.expect(http.StatusForbidden, http.MethodPatch, pPath, staff, map[string]any{"title": "T"}, nil)

	ownMembers := "/api/v1/projects/" + w.own.ID + "/members/"
	var withOther accounts.Project
	w.expect(http.StatusOK, http.MethodPut, ownMembers+w.other.ID, researcher, nil, &withOther)
	if !slices.Contains(withOther.MemberIDs, w.other.ID) {
		t.Errorf("member not added: %+v", withOther)
	}
	w.expect(http.StatusOK, http.MethodPut, pPath+"/members/"+researcherID, manager, nil, nil)
	w.expect(http.StatusForbidden, http.MethodPut, pPath+"/members/"+w.users[accounts.RoleStaff].ID, researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodPut, "/api/v1/projects/"+w.foreign.ID+"/members/"+researcherID, researcher, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodPut, ownMembers+uuid.NewString(), researcher, nil, nil)
	w.expect(http.StatusOK, http.MethodDelete, ownMembers+w.other.ID, researcher, nil, nil)
	w.expect(http.StatusConflict, http.MethodDelete, ownMembers+researcherID, researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodDelete, ownMembers+w.other.ID, researcher, nil, nil)
	w.expect(http.StatusForbidden, http.MethodDelete, ownMembers+w.other.ID, staff, nil, nil)
}

// exerciseInstruments covers instruments and agent tokens.
func exerciseInstruments(t *testing.T, w *world) {
	manager, staff, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher]
	newInstrument := map[string]any{"code": "tem-2", "name": "Cryo TEM", "kind": "tem", "location": "Building 4, room B12",
		"accelerating_voltages_v": []float64{300e3, 80e3, 200e3, 300e3}, "corrector": "image",
		"detectors": []map[string]any{
			{"name": "HAADF", "kind": "annular", "inner_radius_m": 1.5e-3, "outer_radius_m": 9e-3},
			{"name": "K3", "kind": "camera"},
		}}
	var in scheduling.Instrument
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments", manager, newInstrument, &in)
	if in.Code != "TEM-2" || !in.Bookable || !slices.Equal(in.AcceleratingVoltagesV, []float64{80e3, 200e3, 300e3}) || len(in.Detectors) != 2 {
		t.Errorf("created instrument %+v", in)
	}
	var cleaner scheduling.Instrument
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/instruments", manager, map[string]any{"code": "PC-1", "name": "Plasma cleaner", "kind": "other"}, &cleaner)
	if cleaner.AcceleratingVoltagesV == nil || cleaner.Corrector != scheduling.CorrectorNone || !cleaner.Bookable {
		t.Errorf("instrument with defaults %+v", cleaner)
	}
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/instruments", manager, newInstrument, nil)
	w.expect(http.StatusForbidden, http.MethodPost, "/api/v1/instruments", staff, newInstrument, nil)
	kilovolts := map[string]any{"code": "SEM-1", "name": "SEM", "kind": "sem", "accelerating_voltages_v": []float64{30}}
	w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/instruments", manager, kilovolts, nil)

	var all, agentSees list[scheduling.Instrument]
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/instruments", researcher, nil, &all)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/instruments", w.agent, nil, &agentSees)
	if len(all.Items) != 3 || len(agentSees.Items) != 1 || agentSees.Items[0].ID != w.instr.ID {
		t.Errorf("instruments: %d for a researcher, %+v for the agent", len(all.Items), agentSees.Items)
	}
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/instruments", "blagent_unknown", nil, nil)
	inPath := "/api/v1/instruments/" + in.ID
	w.expect(http.StatusOK, http.MethodGet, inPath, researcher, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/instruments/"+w.instr.ID, w.agent, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, inPath, w.agent, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/instruments/"+uuid.NewString(), researcher, nil, nil)

	tokens := inPath + "/agent-tokens"
	newToken := map[string]any{"name": "acquisition PC", "scopes": []string{"usage:write", "instrument:read"},
		"expires_at": w.clock.Now().Add(90 * 24 * time.Hour)}
	var made agentTokenCreated
	r := w.expect(http.StatusCreated, http.MethodPost, tokens, manager, newToken, &made)
	if r.Header.Get("Cache-Control") != "no-store" || made.ExpiresAt == nil || accounts.TokenPrefix(made.Token) != accounts.AgentTokenPrefix {
		t.Errorf("made token %+v, Cache-Control %q", made.AgentToken, r.Header.Get("Cache-Control"))
	}
	w.expect(http.StatusBadRequest, http.MethodPost, tokens, manager, map[string]any{"name": "x", "scopes": []string{"everything"}}, nil)
	w.expect(http.StatusNotFound, http.MethodPost, "/api/v1/instruments/"+uuid.NewString()+"/agent-tokens", manager, newToken, nil)
	w.expect(http.StatusForbidden, http.MethodPost, tokens, staff, newToken, nil)
	w.expect(http.StatusOK, http.MethodGet, inPath, made.Token, nil, nil)

	var listed list[accounts.AgentToken]
	w.expect(http.StatusOK, http.MethodGet, tokens, staff, nil, &listed)
	if len(listed.Items) != 1 || listed.Items[0].LastUsedAt == nil {
		t.Errorf("listed tokens %+v", listed.Items)
	}
	w.expect(http.StatusForbidden, http.MethodGet, tokens, researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/instruments/not-a-uuid/agent-tokens", manager, nil, nil)

	var revoked accounts.AgentToken
	w.expect(http.StatusOK, http.MethodDelete, tokens+"/"+made.ID, manager, nil, &revoked)
	if revoked.RevokedAt == nil {
		t.Errorf("revoked token %+v", revoked)
	}
	w.expect(http.StatusUnauthorized, http.MethodGet, inPath, made.Token, nil, nil)
	w.expect(http.StatusNotFound, http.MethodDelete, "/api/v1/instruments/"+w.instr.ID+"/agent-tokens/"+made.ID, manager, nil, nil)
	w.expect(http.StatusForbidden, http.MethodDelete, tokens+"/"+made.ID, staff, nil, nil)
}

// ruleOf extracts error.rule from an error answer.
func ruleOf(r response) string {
	var e errorBody
	_ = json.Unmarshal(r.Body, &e)
	return e.Error.Rule
}

// exerciseBookings covers qualifications, the calendar, bookings and their history.
func exerciseBookings(t *testing.T, w *world) {
	manager, staff, researcher, auditor := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	staffID, researcherID := w.users[accounts.RoleStaff].ID, w.users[accounts.RoleResearcher].ID

	// Qualifications: grant, list, revoke.
	grants := "/api/v1/instruments/" + w.instr.ID + "/qualifications"
	grant := map[string]any{"user_id": researcherID, "level": "independent", "reason": "Completed STEM training on 2026-02-12", "expires_after_idle_days": 180}
	var q scheduling.Qualification
	w.expect(http.StatusCreated, http.MethodPost, grants, staff, grant, &q)
	if q.Level != scheduling.LevelIndependent || q.GrantedBy != staffID || q.ExpiresAfterIdleDays == nil || *q.ExpiresAfterIdleDays != 180 || q.RevokedAt != nil {
		t.Errorf("granted qualification %+v", q)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodPost, grants, staff, map[string]any{"user_id": researcherID, "level": "expert", "reason": "x"}, nil); !fieldNamed(r, "level") {
		t.Errorf("bad level not named: %s", r.Body)
	}
	w.expect(http.StatusNotFound, http.MethodPost, "/api/v1/instruments/"+uuid.NewString()+"/qualifications", staff, grant, nil)
	w.expect(http.StatusForbidden, http.MethodPost, grants, auditor, grant, nil)

	var other scheduling.Qualification
	w.expect(http.StatusCreated, http.MethodPost, grants, manager, map[string]any{"user_id": w.other.ID, "level": "supervised", "reason": "Induction"}, &other)
	revoke := "/api/v1/qualifications/" + other.ID + "/revoke"
	w.expect(http.StatusBadRequest, http.MethodPost, revoke, manager, map[string]string{"reason": " "}, nil)
	w.expect(http.StatusForbidden, http.MethodPost, revoke, researcher, map[string]string{"reason": "not mine to revoke"}, nil)
	var revoked scheduling.Qualification
	w.expect(http.StatusOK, http.MethodPost, revoke, staff, map[string]string{"reason": "Left the group"}, &revoked)
	if revoked.RevokedAt == nil || revoked.RevokedBy != staffID || revoked.RevokeReason != "Left the group" {
		t.Errorf("revoked qualification %+v", revoked)
	}
	w.expect(http.StatusConflict, http.MethodPost, revoke, staff, map[string]string{"reason": "again"}, nil)
	w.expect(http.StatusNotFound, http.MethodPost, "/api/v1/qualifications/"+uuid.NewString()+"/revoke", staff, map[string]string{"reason": "x"}, nil)

	var qs list[scheduling.Qualification]
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/qualifications", researcher, nil, &qs)
	if len(qs.Items) != 1 || qs.Items[0].ID != q.ID {
		t.Errorf("researcher's qualifications %+v", qs.Items)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/qualifications?include_revoked=true&user_id="+w.other.ID, auditor, nil, &qs)
	if len(qs.Items) != 1 || qs.Items[0].RevokedAt == nil {
		t.Errorf("w.other's qualifications with revoked ones %+v", qs.Items)
	}
	w.expect(http.StatusForbidden, http.MethodGet, "/api/v1/qualifications?user_id="+w.other.ID, researcher, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/qualifications?instrument_id=STEM-T", auditor, nil, nil)

	// Booking: an instant with an offset and a facility wall time are both accepted.
	const bookings = "/api/v1/bookings"
	start := w.nextTuesday(9, 0)
	body := w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent)
	body["end"] = start.Add(2 * time.Hour).In(berlin).Format("2006-01-02T15:04")
	body["note"] = "Cryo holder needed"
	var b bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, bookings, researcher, body, &b)
	if !b.Start.Equal(start) || !b.End.Equal(start.Add(2*time.Hour)) || !b.Mine || b.Resolutions != nil || b.ProjectID != w.own.ID {
		t.Errorf("created booking %+v", b)
	}
	r := w.expect(http.StatusConflict, http.MethodPost, bookings, researcher, w.bookingBody(start.Add(time.Hour), start.Add(3*time.Hour), scheduling.KindIndependent), nil)
	if !fieldNamed(r, "start") || !bytes.Contains(r.Body, []byte(start.UTC().Format(time.RFC3339))) {
		t.Errorf("overlap does not name the range in the way: %s", r.Body)
	}
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPost, bookings, researcher, w.bookingBody(start.Add(3*time.Hour), start.Add(3*time.Hour+15*time.Minute), scheduling.KindIndependent), nil)
	if ruleOf(r) != "min_length" || !fieldNamed(r, "end") {
		t.Errorf("too short a booking: %s", r.Body)
	}
	bad := w.bookingBody(start.Add(3*time.Hour), start.Add(4*time.Hour), scheduling.KindIndependent)
	bad["start"] = "next Tuesday"
	if r := w.expect(http.StatusBadRequest, http.MethodPost, bookings, researcher, bad, nil); !fieldNamed(r, "start") || ruleOf(r) != "" {
		t.Errorf("malformed start: %s", r.Body)
	}
	foreign := w.bookingBody(start.Add(3*time.Hour), start.Add(4*time.Hour), scheduling.KindIndependent)
	foreign["project_id"] = w.foreign.ID
	w.expect(http.StatusNotFound, http.MethodPost, bookings, researcher, foreign, nil)
	w.expect(http.StatusForbidden, http.MethodPost, bookings, auditor, body, nil)

	// Assisted time names the staff member; service time displaces what it overlaps.
	assisted := w.bookingBody(start.Add(3*time.Hour), start.Add(4*time.Hour), scheduling.KindAssisted)
	assisted["staff_id"] = staffID
	var ab bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, bookings, researcher, assisted, &ab)
	if ab.StaffID != staffID || ab.Kind != scheduling.KindAssisted {
		t.Errorf("assisted booking %+v", ab)
	}
	svcStart := w.nextTuesday(15, 0)
	var doomed, svc bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, bookings, researcher, w.bookingBody(svcStart, svcStart.Add(time.Hour), scheduling.KindIndependent), &doomed)
	svcBody := map[string]any{"instrument_id": w.instr.ID, "kind": "service", "note": "Gun bake-out",
		"start": svcStart.Format(time.RFC3339), "end": svcStart.Add(2 * time.Hour).Format(time.RFC3339)}
	w.expect(http.StatusCreated, http.MethodPost, bookings, staff, svcBody, &svc)
	if len(svc.Displaced) != 1 || svc.Displaced[0] != doomed.ID || svc.ProjectID != "" || !svc.Mine || svc.UserID != staffID {
		t.Errorf("service booking %+v", svc.Booking)
	}

	// The calendar.
	cal := calendarPath(w)
	var slots list[calendarSlot]
	w.expect(http.StatusOK, http.MethodGet, cal+"&instrument_id="+w.instr.ID, researcher, nil, &slots)
	if len(slots.Items) != 3 || slots.Items[0].ID != b.ID || !slots.Items[0].Mine || slots.Items[2].ID != svc.ID {
		t.Errorf("calendar %+v", slots.Items)
	}
	w.expect(http.StatusOK, http.MethodGet, cal, w.agent, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, bookings+"?from=yesterday", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, cal+"&instrument_id="+uuid.NewString(), w.agent, nil, nil)

	// One booking, moved, refused a move, cancelled, with its history.
	bPath := bookings + "/" + b.ID
	w.expect(http.StatusOK, http.MethodGet, bPath, auditor, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, bookings+"/"+uuid.NewString(), manager, nil, nil)
	var moved bookingAnswer
	w.expect(http.StatusOK, http.MethodPatch, bPath, researcher,
		map[string]string{"start": start.Add(-time.Hour).Format(time.RFC3339), "end": start.Add(time.Hour).Format(time.RFC3339), "reason": "Earlier start"}, &moved)
	if !moved.Start.Equal(start.Add(-time.Hour)) || !moved.End.Equal(start.Add(time.Hour)) {
		t.Errorf("moved booking %+v", moved.Booking)
	}
	w.expect(http.StatusConflict, http.MethodPatch, bPath, researcher,
		map[string]string{"start": start.Format(time.RFC3339), "end": start.Add(5 * time.Hour).Format(time.RFC3339)}, nil)
	r = w.expect(http.StatusUnprocessableEntity, http.MethodPatch, bPath, researcher,
		map[string]string{"start": w.nextTuesday(6, 0).Format(time.RFC3339), "end": w.nextTuesday(8, 0).Format(time.RFC3339)}, nil)
	if ruleOf(r) != "opening_hours" {
		t.Errorf("move out of opening hours: %s", r.Body)
	}
	w.expect(http.StatusBadRequest, http.MethodPatch, bPath, researcher, map[string]string{"start": "soon"}, nil)
	w.expect(http.StatusForbidden, http.MethodPatch, bPath, auditor, map[string]string{"start": start.Format(time.RFC3339), "end": start.Add(time.Hour).Format(time.RFC3339)}, nil)

	var cancelled bookingAnswer
	w.expect(http.StatusBadRequest, http.MethodPost, bPath+"/cancel", researcher, map[string]string{}, nil)
	w.expect(http.StatusOK, http.MethodPost, bPath+"/cancel", researcher, map[string]string{"reason": "Specimen broke"}, &cancelled)
	if cancelled.Status != scheduling.StatusCancelled || cancelled.CancelledBy != researcherID || cancelled.CancelReason != "Specimen broke" {
		t.Errorf("cancelled booking %+v", cancelled.Booking)
	}
	w.expect(http.StatusConflict, http.MethodPost, bPath+"/cancel", researcher, map[string]string{"reason": "again"}, nil)
	w.expect(http.StatusConflict, http.MethodPatch, bPath, staff, map[string]string{"start": start.Format(time.RFC3339), "end": start.Add(time.Hour).Format(time.RFC3339)}, nil)

	var evs list[scheduling.BookingEvent]
	w.expect(http.StatusOK, http.MethodGet, bPath+"/events", researcher, nil, &evs)
	if len(evs.Items) != 3 || evs.Items[1].Action != "moved" || evs.Items[1].Reason != "Earlier start" || evs.Items[1].Before == nil || evs.Items[2].After != nil {
		t.Errorf("history %+v", evs.Items)
	}
	w.expect(http.StatusOK, http.MethodGet, bookings+"/"+doomed.ID+"/events", researcher, nil, &evs)
	if len(evs.Items) != 2 || evs.Items[1].Action != "displaced" {
		t.Errorf("displaced booking's history %+v", evs.Items)
	}
	w.expect(http.StatusNotFound, http.MethodGet, bookings+"/not-a-uuid/events", auditor, nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, bPath+"/events", w.agent, nil, nil)
}

// exerciseUsage covers check-in, check-out and a booking's usage report.
func exerciseUsage(t *testing.T, w *world) {
	staff, researcher, auditor := w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	start := w.nextTuesday(10, 0)
	// A booking that began three hours ago and runs another hour: work is checked in
	// during its range.
	bID, _ := w.pastBooking(w.instr.ID, w.own.ID, w.users[accounts.RoleResearcher].ID)
	bPath := "/api/v1/bookings/" + bID

	// The researcher checks in five minutes ago, sent with the facility's offset.
	at := w.clock.Now().Add(-5 * time.Minute)
	var in scheduling.Usage
	w.expect(http.StatusOK, http.MethodPost, bPath+"/check-in", researcher, map[string]string{"at": at.In(berlin).Format(time.RFC3339)}, &in)
	if !in.StartedAt.Equal(at) || in.Source != scheduling.SourceUser || in.StartedBy != w.users[accounts.RoleResearcher].ID || in.EndedAt != nil {
		t.Errorf("check-in %+v", in)
	}
	w.expect(http.StatusConflict, http.MethodPost, bPath+"/check-in", staff, nil, nil)
	w.expect(http.StatusForbidden, http.MethodPost, bPath+"/check-in", auditor, nil, nil)
	if r := w.expect(http.StatusBadRequest, http.MethodPost, bPath+"/check-in", researcher, map[string]string{"at": "yesterday"}, nil); !fieldNamed(r, "at") {
		t.Errorf("malformed at not named: %s", r.Body)
	}
	w.expect(http.StatusBadRequest, http.MethodPost, bPath+"/check-in", researcher, map[string]string{"at": w.clock.Now().Add(2 * time.Hour).Format(time.RFC3339)}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, bPath+"/check-in", researcher, map[string]string{"at": w.clock.Now().Add(-25 * time.Hour).Format(time.RFC3339)}, nil)
	// A check-in long before the booked start belongs to no booking.
	var early bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), &early)
	if r := w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/bookings/"+early.ID+"/check-in", researcher, nil, nil); !contains(r.Body, `"rule":"check_in_window"`) {
		t.Errorf("check-in days ahead: %s", r.Body)
	}
	w.expect(http.StatusNotFound, http.MethodPost, "/api/v1/bookings/"+uuid.NewString()+"/check-in", staff, nil, nil)
	// A cancelled booking takes no new work.
	cancelled := w.bookingBody(start.Add(3*time.Hour), start.Add(4*time.Hour), scheduling.KindIndependent)
	var c bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", researcher, cancelled, &c)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+c.ID+"/cancel", researcher, map[string]string{"reason": "Specimen not ready"}, nil)
	w.expect(http.StatusConflict, http.MethodPost, "/api/v1/bookings/"+c.ID+"/check-in", researcher, nil, nil)
	// The agent of one instrument does not reach another instrument's bookings.
	second, err := w.db.CreateInstrument(context.Background(), scheduling.Instrument{Code: "SEM-9", Name: "Usage SEM", Kind: scheduling.KindSEM, Bookable: true, Corrector: scheduling.CorrectorNone}, "setup", time.Now())
	if err != nil {
		t.Fatal(err)
	}
	var elsewhere bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", staff, map[string]any{"instrument_id": second.ID, "kind": "service",
		"start": start.Format(time.RFC3339), "end": start.Add(time.Hour).Format(time.RFC3339)}, &elsewhere)
	w.expect(http.StatusNotFound, http.MethodPost, "/api/v1/bookings/"+elsewhere.ID+"/check-in", w.agent, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/bookings/"+elsewhere.ID+"/usage", w.agent, nil, nil)

	// The instrument's agent checks out; a check-out before the check-in is refused.
	if r := w.expect(http.StatusBadRequest, http.MethodPost, bPath+"/check-out", w.agent, map[string]string{"at": at.Add(-time.Minute).Format(time.RFC3339)}, nil); !fieldNamed(r, "at") {
		t.Errorf("check-out before check-in not named: %s", r.Body)
	}
	var out scheduling.Usage
	w.expect(http.StatusOK, http.MethodPost, bPath+"/check-out", w.agent, nil, &out)
	if out.ID != in.ID || out.EndedAt == nil || !out.EndedAt.Equal(w.clock.Now()) || out.EndedBy != "agent:"+w.agentID || out.Source != scheduling.SourceUser {
		t.Errorf("check-out %+v", out)
	}
	w.expect(http.StatusConflict, http.MethodPost, bPath+"/check-out", researcher, nil, nil)
	w.expect(http.StatusForbidden, http.MethodPost, bPath+"/check-out", auditor, nil, nil)
	// A booking's usages follow one another: a check-in dated before its last
	// check-out is refused, naming at.
	if r := w.expect(http.StatusBadRequest, http.MethodPost, bPath+"/check-in", researcher, map[string]string{"at": w.clock.Now().Add(-time.Minute).Format(time.RFC3339)}, nil); !fieldNamed(r, "at") {
		t.Errorf("check-in before the last check-out not named: %s", r.Body)
	}

	// [constructed] five minutes of work, all of it inside the booked range.
	var rep scheduling.UsageReport
	w.expect(http.StatusOK, http.MethodGet, bPath+"/usage", auditor, nil, &rep)
	if rep.BookingID != bID || len(rep.Usages) != 1 || rep.UsedMinutes != 5 || rep.OverrunMinutes != 0 || rep.NoShowAt != nil {
		t.Errorf("usage report %+v", rep)
	}
	w.expect(http.StatusOK, http.MethodGet, bPath+"/usage", w.agent, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/bookings/not-a-uuid/usage", researcher, nil, nil)
}

// exerciseFeeds covers calendar-feed tokens and the feeds they open.
func exerciseFeeds(t *testing.T, w *world) {
	manager, researcher := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleResearcher]
	var made feedTokenCreated
	r := w.expect(http.StatusCreated, http.MethodPost, "/api/v1/me/feed-tokens", researcher, nil, &made)
	if r.Header.Get("Cache-Control") != "no-store" || accounts.TokenPrefix(made.Token) != accounts.FeedTokenPrefix ||
		made.UserID != w.users[accounts.RoleResearcher].ID || made.MyBookings != "/feeds/"+made.Token+"/mine.ics" {
		t.Errorf("made feed token %+v, Cache-Control %q", made, r.Header.Get("Cache-Control"))
	}
	w.expect(http.StatusForbidden, http.MethodPost, "/api/v1/me/feed-tokens", w.agent, nil, nil)
	var listed list[accounts.FeedToken]
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/me/feed-tokens", researcher, nil, &listed)
	if len(listed.Items) != 1 || listed.Items[0].ID != made.ID || listed.Items[0].RevokedAt != nil {
		t.Errorf("listed feed tokens %+v", listed.Items)
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/me/feed-tokens", manager, nil, &listed)
	if len(listed.Items) != 0 {
		t.Errorf("the manager sees the researcher's feed tokens: %+v", listed.Items)
	}
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/me/feed-tokens", "", nil, nil)

	// The researcher's own feed holds their cancelled bookings too, marked so.
	r = w.expect(http.StatusOK, http.MethodGet, made.MyBookings, "", nil, nil)
	if r.Header.Get("Content-Type") != "text/calendar; charset=utf-8" || !contains(r.Body, "BEGIN:VCALENDAR\r\n") || !contains(r.Body, "STATUS:CANCELLED") {
		t.Errorf("my feed: %q\n%s", r.Header.Get("Content-Type"), r.Body)
	}
	instrFeed := strings.Replace(made.Instrument, "{instrument_id}", w.instr.ID, 1)
	if r := w.expect(http.StatusOK, http.MethodGet, instrFeed, "", nil, nil); !contains(r.Body, "X-WR-CALNAME:"+w.instr.Name) {
		t.Errorf("instrument feed:\n%s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodGet, strings.TrimSuffix(instrFeed, ".ics"), "", nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/feeds/"+made.Token+"/instruments/"+uuid.NewString()+".ics", "", nil, nil)

	// Only the owner revokes a token; a revoked token opens nothing.
	w.expect(http.StatusNotFound, http.MethodDelete, "/api/v1/me/feed-tokens/"+made.ID, manager, nil, nil)
	var revoked accounts.FeedToken
	w.expect(http.StatusOK, http.MethodDelete, "/api/v1/me/feed-tokens/"+made.ID, researcher, nil, &revoked)
	if revoked.RevokedAt == nil {
		t.Errorf("revoked feed token %+v", revoked)
	}
	w.expect(http.StatusNotFound, http.MethodGet, made.MyBookings, "", nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, instrFeed, "", nil, nil)
	w.expect(http.StatusNotFound, http.MethodDelete, "/api/v1/me/feed-tokens/"+uuid.NewString(), researcher, nil, nil)
}

// exerciseSeries covers recurring bookings: a series booked whole, refused whole or
// booked in part, read, and cancelled from a given day on.
func exerciseSeries(t *testing.T, w *world) {
	staff, researcher, auditor := w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	researcherID := w.users[accounts.RoleResearcher].ID
	const series = "/api/v1/series"
	// Wednesdays, clear of the Tuesdays the exercises above booked.
	first := w.nextTuesday(9, 0).AddDate(0, 0, 1)
	seriesBody := func(rrule string, start time.Time, minutes int) map[string]any {
		return map[string]any{"instrument_id": w.instr.ID, "project_id": w.own.ID, "kind": "independent",
			"rrule": rrule, "start": start.In(berlin).Format("2006-01-02T15:04"), "duration_minutes": minutes}
	}

	// Three Wednesdays at 09:00 local; the rule's prefix and case are normalised.
	weekly := seriesBody("RRULE:freq=weekly;count=3;byday=we", first, 120)
	weekly["note"] = "Weekly cryo session"
	var made scheduling.SeriesResult
	w.expect(http.StatusCreated, http.MethodPost, series, researcher, weekly, &made)
	sr := made.Series
	if sr.RRule != "FREQ=WEEKLY;COUNT=3;BYDAY=WE" || sr.Start.String() != first.In(berlin).Format("2006-01-02T15:04:05") ||
		sr.TimeZone != "Europe/Berlin" || sr.DurationMinutes != 120 || sr.UserID != researcherID || sr.CreatedBy != researcherID ||
		sr.ProjectID != w.own.ID || len(made.Booked) != 3 || len(made.Conflicts) != 0 {
		t.Fatalf("created series %+v, booked %d, conflicts %+v", sr, len(made.Booked), made.Conflicts)
	}
	for i, b := range made.Booked {
		// Each a week after the last, at the same wall time [published: RFC 5545 §3.3.10].
		at := first.AddDate(0, 0, 7*i)
		if !b.Start.Equal(at) || !b.End.Equal(at.Add(2*time.Hour)) || b.SeriesID != sr.ID || b.Note != "Weekly cryo session" || b.Status != scheduling.StatusActive {
			t.Errorf("booking %d of the series %+v, want it at %s", i, b, at)
		}
	}

	// Daily at 10:00 from that first Wednesday: Wednesday overlaps the series above and
	// Saturday is outside opening hours, so the whole series is refused...
	daily := seriesBody("FREQ=DAILY;COUNT=4", first.Add(time.Hour), 60)
	wed, sat := first.Add(time.Hour), first.Add(time.Hour).AddDate(0, 0, 3)
	r := w.expect(http.StatusConflict, http.MethodPost, series, researcher, daily, nil)
	var refused errorBody
	if err := json.Unmarshal(r.Body, &refused); err != nil || len(refused.Error.Fields) != 2 ||
		!fieldNamed(r, "occurrence "+wed.UTC().Format(time.RFC3339)) || !fieldNamed(r, "occurrence "+sat.UTC().Format(time.RFC3339)) {
		t.Errorf("refused series: %s", r.Body)
	}
	// ...unless the free bookings are asked for. Thursday and Friday are free, which they
	// would not be had the refused series booked them.
	daily["book_free"] = true
	var part scheduling.SeriesResult
	w.expect(http.StatusCreated, http.MethodPost, series, researcher, daily, &part)
	if len(part.Booked) != 2 || !part.Booked[0].Start.Equal(wed.AddDate(0, 0, 1)) || !part.Booked[1].Start.Equal(wed.AddDate(0, 0, 2)) {
		t.Errorf("booked in part: %+v", part.Booked)
	}
	if len(part.Conflicts) != 2 {
		t.Fatalf("conflicts of the series booked in part: %+v", part.Conflicts)
	}
	if c := part.Conflicts[0]; !c.Start.Equal(wed) || c.Rule != "" || !strings.Contains(c.Message, first.UTC().Format(time.RFC3339)) {
		t.Errorf("overlapping booking refused as %+v", c)
	}
	if c := part.Conflicts[1]; !c.Start.Equal(sat) || !c.End.Equal(sat.Add(time.Hour)) || c.Rule != "opening_hours" {
		t.Errorf("Saturday booking refused as %+v", c)
	}
	// A series with every booking refused is still stored, with no bookings.
	weekly["book_free"] = true
	var none scheduling.SeriesResult
	w.expect(http.StatusCreated, http.MethodPost, series, researcher, weekly, &none)
	if len(none.Booked) != 0 || len(none.Conflicts) != 3 {
		t.Errorf("series over taken times: booked %d, conflicts %+v", len(none.Booked), none.Conflicts)
	}
	var empty seriesAnswer
	w.expect(http.StatusOK, http.MethodGet, series+"/"+none.Series.ID, researcher, nil, &empty)
	if empty.Series.ID != none.Series.ID || empty.Bookings == nil || len(empty.Bookings) != 0 {
		t.Errorf("series with no bookings %+v", empty)
	}

	// Malformed series are refused with the field named.
	bad := []struct {
		field string
		body  map[string]any
	}{
		{"rrule", seriesBody("FREQ=FORTNIGHTLY;COUNT=2", first, 60)},
		{"rrule", seriesBody("FREQ=DAILY;COUNT=105", first, 60)},
		{"start", seriesBody("FREQ=WEEKLY;COUNT=2;BYDAY=TU", first, 60)},
		{"start", seriesBody("FREQ=WEEKLY;COUNT=2", first, 60)},
		{"duration_minutes", seriesBody("FREQ=WEEKLY;COUNT=2", first, 0)},
	}
	bad[3].body["start"] = "next Wednesday"
	for _, b := range bad {
		if r := w.expect(http.StatusBadRequest, http.MethodPost, series, researcher, b.body, nil); !fieldNamed(r, b.field) {
			t.Errorf("%v: %s does not name %s", b.body, r.Body, b.field)
		}
	}
	service := seriesBody("FREQ=WEEKLY;COUNT=2", first.Add(8*time.Hour), 60)
	service["kind"] = "service"
	if r := w.expect(http.StatusUnprocessableEntity, http.MethodPost, series, researcher, service, nil); ruleOf(r) != "service_by_staff" {
		t.Errorf("researcher's service series: %s", r.Body)
	}
	foreign := seriesBody("FREQ=WEEKLY;COUNT=2", first.Add(8*time.Hour), 60)
	foreign["project_id"] = w.foreign.ID
	w.expect(http.StatusNotFound, http.MethodPost, series, researcher, foreign, nil)
	forOther := seriesBody("FREQ=WEEKLY;COUNT=2", first.Add(8*time.Hour), 60)
	forOther["user_id"] = w.other.ID
	w.expect(http.StatusForbidden, http.MethodPost, series, researcher, forOther, nil)
	w.expect(http.StatusForbidden, http.MethodPost, series, auditor, weekly, nil)

	// Reading a series.
	sPath := series + "/" + sr.ID
	var got seriesAnswer
	w.expect(http.StatusOK, http.MethodGet, sPath, auditor, nil, &got)
	if got.Series != sr || len(got.Bookings) != 3 || got.Bookings[0].ID != made.Booked[0].ID || got.Bookings[2].ID != made.Booked[2].ID {
		t.Errorf("series as read %+v", got)
	}
	other := w.login(w.other.Email, testPassword).AccessToken
	w.expect(http.StatusNotFound, http.MethodGet, sPath, other, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, series+"/"+uuid.NewString(), staff, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, series+"/not-a-uuid", auditor, nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, sPath, w.agent, nil, nil)

	// Cancelling the rest of it: from the second Wednesday, sent with the facility's
	// offset; then from now, which takes the first; then nothing is left.
	cancel := sPath + "/cancel"
	w.expect(http.StatusBadRequest, http.MethodPost, cancel, researcher, map[string]string{"reason": " "}, nil)
	if r := w.expect(http.StatusBadRequest, http.MethodPost, cancel, researcher, map[string]string{"reason": "Project paused", "from": "next week"}, nil); !fieldNamed(r, "from") {
		t.Errorf("malformed from not named: %s", r.Body)
	}
	w.expect(http.StatusNotFound, http.MethodPost, series+"/"+uuid.NewString()+"/cancel", staff, map[string]string{"reason": "x"}, nil)
	w.expect(http.StatusForbidden, http.MethodPost, cancel, auditor, map[string]string{"reason": "x"}, nil)
	var rest list[scheduling.Booking]
	from := made.Booked[1].Start.In(berlin).Format(time.RFC3339)
	w.expect(http.StatusOK, http.MethodPost, cancel, researcher, map[string]string{"reason": "Project paused", "from": from}, &rest)
	ids := map[string]bool{}
	for _, b := range rest.Items {
		ids[b.ID] = true
		if b.Status != scheduling.StatusCancelled || b.CancelledBy != researcherID || b.CancelReason != "Project paused" || b.SeriesID != sr.ID {
			t.Errorf("cancelled booking %+v", b)
		}
	}
	if len(rest.Items) != 2 || !ids[made.Booked[1].ID] || !ids[made.Booked[2].ID] {
		t.Errorf("cancelled from the second Wednesday: %+v", rest.Items)
	}
	var left, nothing list[scheduling.Booking]
	w.expect(http.StatusOK, http.MethodPost, cancel, researcher, map[string]string{"reason": "Project stopped"}, &left)
	if len(left.Items) != 1 || left.Items[0].ID != made.Booked[0].ID {
		t.Errorf("cancelled from now: %+v", left.Items)
	}
	w.expect(http.StatusOK, http.MethodPost, cancel, staff, map[string]string{"reason": "again"}, &nothing)
	if nothing.Items == nil || len(nothing.Items) != 0 {
		t.Errorf("cancelled from a series with nothing left: %+v", nothing.Items)
	}
	var after seriesAnswer
	w.expect(http.StatusOK, http.MethodGet, sPath, researcher, nil, &after)
	if len(after.Bookings) != 3 {
		t.Errorf("after cancelling, the series has %d bookings, want all 3", len(after.Bookings))
	}
	for _, b := range after.Bookings {
		if b.Status != scheduling.StatusCancelled {
			t.Errorf("after cancelling the whole series, %+v", b)
		}
	}

	// A fellow member of the project reads the series but does not cancel it.
	if _, err := w.db.AddMember(context.Background(), w.own.ID, w.other.ID); err != nil {
		t.Fatal(err)
	}
	w.expect(http.StatusOK, http.MethodGet, series+"/"+part.Series.ID, other, nil, nil)
	w.expect(http.StatusForbidden, http.MethodPost, series+"/"+part.Series.ID+"/cancel", other, map[string]string{"reason": "not mine"}, nil)
}

// exerciseQuotas covers quotas and the fair-share report, in a week three weeks after
// the Tuesday the exercises above book, which only this one books.
func exerciseQuotas(t *testing.T, w *world) {
	manager, staff, researcher, auditor := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	const quotas = "/api/v1/quotas"
	weekly := scheduling.Quota{ProjectID: w.own.ID, InstrumentID: w.instr.ID, Period: scheduling.PeriodWeek, AllocatedMinutes: 600}
	var got scheduling.Quota
	w.expect(http.StatusOK, http.MethodPut, quotas, manager, weekly, &got)
	if got != weekly {
		t.Errorf("set quota %+v, want %+v", got, weekly)
	}
	// Setting it again replaces it.
	weekly.AllocatedMinutes = 900
	w.expect(http.StatusOK, http.MethodPut, quotas, manager, weekly, nil)
	monthly := scheduling.Quota{ProjectID: w.own.ID, InstrumentID: w.instr.ID, Period: scheduling.PeriodMonth, AllocatedMinutes: 2400}
	w.expect(http.StatusOK, http.MethodPut, quotas, manager, monthly, nil)
	foreign := scheduling.Quota{ProjectID: w.foreign.ID, InstrumentID: w.instr.ID, Period: scheduling.PeriodWeek, AllocatedMinutes: 300}
	w.expect(http.StatusOK, http.MethodPut, quotas, manager, foreign, nil)

	bad := []struct {
		field string
		body  map[string]any
	}{
		{"period", map[string]any{"project_id": w.own.ID, "instrument_id": w.instr.ID, "period": "fortnight", "allocated_minutes": 60}},
		{"allocated_minutes", map[string]any{"project_id": w.own.ID, "instrument_id": w.instr.ID, "period": "week", "allocated_minutes": -1}},
		{"project_id", map[string]any{"project_id": "OWN-1", "instrument_id": w.instr.ID, "period": "week", "allocated_minutes": 60}},
		{"instrument_id", map[string]any{"project_id": w.own.ID, "period": "week", "allocated_minutes": 60}},
		{"allocation", map[string]any{"project_id": w.own.ID, "instrument_id": w.instr.ID, "period": "week", "allocation": 60}},
	}
	for _, b := range bad {
		if r := w.expect(http.StatusBadRequest, http.MethodPut, quotas, manager, b.body, nil); !fieldNamed(r, b.field) {
			t.Errorf("%v: %s does not name %s", b.body, r.Body, b.field)
		}
	}
	unknown := scheduling.Quota{ProjectID: uuid.NewString(), InstrumentID: w.instr.ID, Period: scheduling.PeriodWeek, AllocatedMinutes: 60}
	if r := w.expect(http.StatusBadRequest, http.MethodPut, quotas, manager, unknown, nil); r.errorCode() != "invalid" {
		t.Errorf("quota of an unknown project: %s", r.Body)
	}
	w.expect(http.StatusForbidden, http.MethodPut, quotas, staff, weekly, nil)

	var all, own list[scheduling.Quota]
	w.expect(http.StatusOK, http.MethodGet, quotas, auditor, nil, &all)
	if len(all.Items) != 3 || !slices.Contains(all.Items, weekly) || !slices.Contains(all.Items, monthly) || !slices.Contains(all.Items, foreign) {
		t.Errorf("every quota: %+v", all.Items)
	}
	w.expect(http.StatusOK, http.MethodGet, quotas+"?project_id="+w.own.ID, researcher, nil, &own)
	if len(own.Items) != 2 || own.Items[0] != monthly || own.Items[1] != weekly {
		t.Errorf("own project's quotas: %+v, want the monthly then the weekly one", own.Items)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodGet, quotas, researcher, nil, nil); !fieldNamed(r, "project_id") {
		t.Errorf("researcher without project_id: %s", r.Body)
	}
	w.expect(http.StatusNotFound, http.MethodGet, quotas+"?project_id="+w.foreign.ID, researcher, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, quotas+"?project_id=OWN-1", manager, nil, nil)
	w.expect(http.StatusForbidden, http.MethodGet, quotas, w.agent, nil, nil)

	// Three hours booked of the fifteen allocated in that week; nothing used yet.
	tuesday := w.nextTuesday(9, 0).AddDate(0, 0, 21)
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(tuesday, tuesday.Add(3*time.Hour), scheduling.KindIndependent), nil)
	monday := time.Date(tuesday.Year(), tuesday.Month(), tuesday.Day()-1, 0, 0, 0, 0, berlin)
	report := "/api/v1/reports/fair-share?period=week&at=" + url.QueryEscape(tuesday.Add(3*time.Hour).Format(time.RFC3339))
	var lines list[scheduling.ShareLine]
	w.expect(http.StatusOK, http.MethodGet, report, researcher, nil, &lines)
	// [constructed] 180 of 900 minutes is 200 per mille.
	want := scheduling.ShareLine{ProjectID: w.own.ID, InstrumentID: w.instr.ID, AllocatedMinutes: 900, BookedMinutes: 180, BookedPermille: 200}
	if len(lines.Items) != 1 {
		t.Fatalf("researcher's fair-share lines: %+v", lines.Items)
	}
	l := lines.Items[0]
	if !l.PeriodStart.Equal(monday) || !l.PeriodEnd.Equal(monday.AddDate(0, 0, 7)) {
		t.Errorf("week of the report: %s to %s, want from %s", l.PeriodStart, l.PeriodEnd, monday)
	}
	l.PeriodStart, l.PeriodEnd = time.Time{}, time.Time{}
	if l != want {
		t.Errorf("researcher's line %+v, want %+v", l, want)
	}
	// The manager also sees the foreign project's quota, with nothing booked.
	w.expect(http.StatusOK, http.MethodGet, report, manager, nil, &lines)
	if len(lines.Items) != 2 {
		t.Errorf("manager's fair-share lines: %+v, want the researcher's and the foreign project's", lines.Items)
	}
	// By default, the month containing now, against the monthly quota.
	now := w.clock.Now().In(berlin)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/reports/fair-share", auditor, nil, &lines)
	var sawMonthly bool
	for _, l := range lines.Items {
		if !l.PeriodStart.Equal(time.Date(now.Year(), now.Month(), 1, 0, 0, 0, 0, berlin)) {
			t.Errorf("default period starts %s, want the 1st of this month", l.PeriodStart)
		}
		sawMonthly = sawMonthly || (l.ProjectID == w.own.ID && l.InstrumentID == w.instr.ID && l.AllocatedMinutes == monthly.AllocatedMinutes)
	}
	if !sawMonthly {
		t.Errorf("default report %+v has no line with the monthly quota", lines.Items)
	}

	if r := w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/reports/fair-share?period=fortnight", researcher, nil, nil); !fieldNamed(r, "period") {
		t.Errorf("unknown period: %s", r.Body)
	}
	// An unescaped + in the offset arrives as a space.
	unescaped := "/api/v1/reports/fair-share?at=" + tuesday.Format(time.RFC3339)
	if !strings.Contains(unescaped, "+") {
		t.Fatalf("%s has no + to lose", unescaped)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodGet, unescaped, researcher, nil, nil); !fieldNamed(r, "at") {
		t.Errorf("unescaped offset: %s", r.Body)
	}
	w.expect(http.StatusForbidden, http.MethodGet, "/api/v1/reports/fair-share", w.agent, nil, nil)
}

// exerciseWaitlist covers the waitlist: waiting for taken time, the offer made when it
// frees up, accepting it (refused while a booking rule stands in the way), withdrawing,
// and who sees which entries. It books a Thursday nine days after the Tuesday the
// exercises above book, which none of them books.
func exerciseWaitlist(t *testing.T, w *world) {
	manager, staff, researcher, auditor := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	researcherID := w.users[accounts.RoleResearcher].ID
	other := w.login(w.other.Email, testPassword).AccessToken
	const waitlist = "/api/v1/waitlist"
	thursday := w.nextTuesday(9, 0).AddDate(0, 0, 9)
	// wait asks for a range for w.other in the foreign project.
	wait := func(start, end time.Time) map[string]any {
		return map[string]any{"instrument_id": w.instr.ID, "project_id": w.foreign.ID, "kind": "independent",
			"start": start.Format(time.RFC3339), "end": end.Format(time.RFC3339)}
	}

	// The researcher holds 09:00–12:00; w.other waits for 10:00–11:00, and a manager
	// asks for 11:00–12:00 on w.other's behalf.
	var held bookingAnswer
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(thursday, thursday.Add(3*time.Hour), scheduling.KindIndependent), &held)
	var first, second scheduling.WaitlistEntry
	w.expect(http.StatusCreated, http.MethodPost, waitlist, other, wait(thursday.Add(time.Hour), thursday.Add(2*time.Hour)), &first)
	if first.Status != scheduling.WaitlistWaiting || first.UserID != w.other.ID || first.ProjectID != w.foreign.ID ||
		!first.Start.Equal(thursday.Add(time.Hour)) || !first.End.Equal(thursday.Add(2*time.Hour)) || first.OfferExpiresAt != nil {
		t.Errorf("joined the waitlist %+v", first)
	}
	forOther := wait(thursday.Add(2*time.Hour), thursday.Add(3*time.Hour))
	forOther["user_id"] = w.other.ID
	w.expect(http.StatusCreated, http.MethodPost, waitlist, manager, forOther, &second)
	if second.UserID != w.other.ID || second.Status != scheduling.WaitlistWaiting {
		t.Errorf("joined for w.other %+v", second)
	}

	// Free time is booked, not waited for; so is service time.
	w.expect(http.StatusConflict, http.MethodPost, waitlist, other, wait(thursday.Add(4*time.Hour), thursday.Add(5*time.Hour)), nil)
	service := wait(thursday, thursday.Add(time.Hour))
	service["kind"] = "service"
	if r := w.expect(http.StatusBadRequest, http.MethodPost, waitlist, staff, service, nil); !fieldNamed(r, "kind") {
		t.Errorf("waiting for service time: %s", r.Body)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodPost, waitlist, other, wait(thursday.Add(time.Hour), thursday), nil); !fieldNamed(r, "end") {
		t.Errorf("end before start: %s", r.Body)
	}
	// A researcher waits only for themself, in their own projects.
	w.expect(http.StatusNotFound, http.MethodPost, waitlist, researcher, wait(thursday, thursday.Add(time.Hour)), nil)
	someoneElse := w.bookingBody(thursday, thursday.Add(time.Hour), scheduling.KindIndependent)
	someoneElse["user_id"] = w.other.ID
	w.expect(http.StatusForbidden, http.MethodPost, waitlist, researcher, someoneElse, nil)
	w.expect(http.StatusForbidden, http.MethodPost, waitlist, auditor, forOther, nil)
	w.expect(http.StatusUnauthorized, http.MethodPost, waitlist, "", forOther, nil)

	// w.other withdraws the entry made for them; the researcher cannot see it.
	withdrawSecond := waitlist + "/" + second.ID + "/withdraw"
	w.expect(http.StatusNotFound, http.MethodPost, withdrawSecond, researcher, nil, nil)
	w.expect(http.StatusForbidden, http.MethodPost, withdrawSecond, auditor, nil, nil)
	var withdrawn scheduling.WaitlistEntry
	w.expect(http.StatusOK, http.MethodPost, withdrawSecond, other, nil, &withdrawn)
	if withdrawn.ID != second.ID || withdrawn.Status != scheduling.WaitlistWithdrawn {
		t.Errorf("withdrawn entry %+v", withdrawn)
	}
	w.expect(http.StatusConflict, http.MethodPost, withdrawSecond, other, nil, nil)
	w.expect(http.StatusNotFound, http.MethodPost, waitlist+"/"+uuid.NewString()+"/withdraw", staff, nil, nil)
	w.expect(http.StatusNotFound, http.MethodPost, waitlist+"/not-a-uuid/withdraw", manager, nil, nil)

	// Nothing is on offer while the time is taken. The researcher cancels: the hour is
	// offered to w.other for two hours.
	accept := waitlist + "/" + first.ID + "/accept"
	w.expect(http.StatusConflict, http.MethodPost, accept, other, nil, nil)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/bookings/"+held.ID+"/cancel", researcher, map[string]string{"reason": "Plans changed"}, nil)
	var open list[scheduling.WaitlistEntry]
	w.expect(http.StatusOK, http.MethodGet, waitlist+"?instrument_id="+w.instr.ID, staff, nil, &open)
	if len(open.Items) != 1 || open.Items[0].ID != first.ID || open.Items[0].Status != scheduling.WaitlistOffered ||
		open.Items[0].OfferExpiresAt == nil || !open.Items[0].OfferExpiresAt.Equal(w.clock.Now().Add(2*time.Hour)) {
		t.Errorf("open entries after the cancellation: %+v", open.Items)
	}

	// w.other's qualification on the instrument was revoked above: the offer is refused
	// under the booking rules and stays open until they are qualified again.
	if r := w.expect(http.StatusUnprocessableEntity, http.MethodPost, accept, other, nil, nil); ruleOf(r) != "qualification" {
		t.Errorf("accepting without a qualification: %s", r.Body)
	}
	w.expect(http.StatusNotFound, http.MethodPost, accept, researcher, nil, nil)
	w.expect(http.StatusForbidden, http.MethodPost, accept, auditor, nil, nil)
	w.qualify(w.other.ID, scheduling.LevelIndependent)
	var acc offerAccepted
	w.expect(http.StatusOK, http.MethodPost, accept, other, nil, &acc)
	b := acc.Booking
	if acc.Entry.ID != first.ID || acc.Entry.Status != scheduling.WaitlistBooked || acc.Entry.BookingID != b.ID || b.ID == "" ||
		b.UserID != w.other.ID || b.ProjectID != w.foreign.ID || b.Kind != scheduling.KindIndependent || b.Status != scheduling.StatusActive ||
		!b.Start.Equal(first.Start) || !b.End.Equal(first.End) || b.CreatedBy != w.other.ID || b.Note != "booked from the waitlist" {
		t.Errorf("accepted offer %+v", acc)
	}
	w.expect(http.StatusConflict, http.MethodPost, accept, other, nil, nil)
	w.expect(http.StatusNotFound, http.MethodPost, waitlist+"/"+uuid.NewString()+"/accept", manager, nil, nil)

	// The researcher now waits for the hour w.other booked. Researchers list only their
	// own entries; the others list everyone's, closed ones when asked.
	var mine scheduling.WaitlistEntry
	w.expect(http.StatusCreated, http.MethodPost, waitlist, researcher, w.bookingBody(first.Start, first.End, scheduling.KindIndependent), &mine)
	ids := func(token, query string) []string {
		t.Helper()
		var l list[scheduling.WaitlistEntry]
		w.expect(http.StatusOK, http.MethodGet, waitlist+query, token, nil, &l)
		var out []string
		for _, e := range l.Items {
			out = append(out, e.ID)
		}
		return out
	}
	if got := ids(researcher, "?include_closed=true"); !slices.Equal(got, []string{mine.ID}) {
		t.Errorf("researcher's entries %v, want only %s", got, mine.ID)
	}
	if got := ids(other, "?include_closed=true"); !slices.Equal(got, []string{first.ID, second.ID}) {
		t.Errorf("w.other's entries %v, want %s then %s", got, first.ID, second.ID)
	}
	if got := ids(auditor, "?include_closed=true&instrument_id="+w.instr.ID); !slices.Equal(got, []string{first.ID, second.ID, mine.ID}) {
		t.Errorf("every entry, oldest first: %v", got)
	}
	if got := ids(manager, ""); !slices.Equal(got, []string{mine.ID}) {
		t.Errorf("open entries %v, want only %s", got, mine.ID)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodGet, waitlist+"?instrument_id=STEM-T", auditor, nil, nil); !fieldNamed(r, "instrument_id") {
		t.Errorf("instrument code for an id: %s", r.Body)
	}
	w.expect(http.StatusForbidden, http.MethodGet, waitlist, w.agent, nil, nil)
	w.expect(http.StatusUnauthorized, http.MethodGet, waitlist, "", nil, nil)

	// Staff withdraw anyone's entry.
	w.expect(http.StatusOK, http.MethodPost, waitlist+"/"+mine.ID+"/withdraw", staff, nil, &withdrawn)
	if withdrawn.Status != scheduling.WaitlistWithdrawn || withdrawn.UserID != researcherID {
		t.Errorf("entry withdrawn by staff %+v", withdrawn)
	}
}

// exerciseBookingRules covers the facility's and an instrument's booking rules: their
// defaults, changes and invalid changes. It runs last: the rules it leaves would refuse
// the bookings the exercises above make.
func exerciseBookingRules(t *testing.T, w *world) {
	manager, staff, researcher, auditor := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	const facility = "/api/v1/facility/booking-rules"
	instrument := "/api/v1/instruments/" + w.instr.ID + "/booking-rules"
	defaults := scheduling.DefaultRules()

	var got rulesAnswer
	w.expect(http.StatusOK, http.MethodGet, facility, auditor, nil, &got)
	if !reflect.DeepEqual(got.Effective, defaults) || !reflect.DeepEqual(got.Override, scheduling.RulesOverride{}) {
		t.Errorf("facility rules before any change: %+v", got)
	}
	w.expect(http.StatusOK, http.MethodGet, facility, w.agent, nil, nil)
	w.expect(http.StatusUnauthorized, http.MethodGet, facility, "", nil, nil)

	// A longer horizon, and no prime time: [] clears the list, null inherits it.
	r := w.expect(http.StatusOK, http.MethodPut, facility, manager, map[string]any{"horizon_days": 120, "prime_time": []any{}, "opening_hours": nil}, &got)
	if got.Effective.HorizonDays != 120 || got.Effective.PrimeTime == nil || len(got.Effective.PrimeTime) != 0 ||
		!reflect.DeepEqual(got.Effective.OpeningHours, defaults.OpeningHours) || got.Effective.SlotMinutes != defaults.SlotMinutes {
		t.Errorf("facility rules in force: %+v", got.Effective)
	}
	if got.Override.PrimeTime == nil || got.Override.OpeningHours != nil || got.Override.SlotMinutes != nil || !contains(r.Body, `"opening_hours":null`) {
		t.Errorf("facility override as stored: %s", r.Body)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodPut, facility, manager, map[string]any{"slot_minutes": 7}, nil); !fieldNamed(r, "slot_minutes") {
		t.Errorf("7-minute slots: %s", r.Body)
	}
	if r := w.expect(http.StatusBadRequest, http.MethodPut, facility, manager, map[string]any{"slots": 30}, nil); !fieldNamed(r, "slots") {
		t.Errorf("unknown field: %s", r.Body)
	}
	w.expect(http.StatusForbidden, http.MethodPut, facility, staff, map[string]any{}, nil)

	// The instrument books on the hour, for at least two hours, over longer opening
	// hours; the rest it inherits from the facility.
	longer := []scheduling.ClockWindow{{Days: []time.Weekday{time.Monday, time.Tuesday, time.Wednesday, time.Thursday, time.Friday}, Start: "07:00", End: "19:00"}}
	change := map[string]any{"slot_minutes": 60, "min_length_minutes": 120, "opening_hours": longer}
	var in, read rulesAnswer
	w.expect(http.StatusOK, http.MethodPut, instrument, manager, change, &in)
	if e := in.Effective; e.SlotMinutes != 60 || e.MinLengthMinutes != 120 || e.HorizonDays != 120 || len(e.PrimeTime) != 0 || !reflect.DeepEqual(e.OpeningHours, longer) {
		t.Errorf("instrument rules in force: %+v", e)
	}
	w.expect(http.StatusOK, http.MethodGet, instrument, researcher, nil, &read)
	if !reflect.DeepEqual(read, in) {
		t.Errorf("instrument rules as read %+v, as set %+v", read, in)
	}
	w.expect(http.StatusOK, http.MethodGet, instrument, w.agent, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/instruments/"+uuid.NewString()+"/booking-rules", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodPut, "/api/v1/instruments/"+uuid.NewString()+"/booking-rules", manager, change, nil)
	if r := w.expect(http.StatusBadRequest, http.MethodPut, instrument, manager, map[string]any{"opening_hours": []any{}}, nil); !fieldNamed(r, "opening_hours") {
		t.Errorf("no opening hours: %s", r.Body)
	}
	badWindow := map[string]any{"prime_time": []map[string]any{{"start": "9:00", "end": "17:00"}}}
	if r := w.expect(http.StatusBadRequest, http.MethodPut, instrument, manager, badWindow, nil); !fieldNamed(r, "prime_time") {
		t.Errorf("malformed window: %s", r.Body)
	}
	w.expect(http.StatusForbidden, http.MethodPut, instrument, staff, change, nil)

	// Facility bookings of at most 90 minutes would leave the instrument's two-hour
	// shortest booking invalid: refused, naming the instrument, and nothing changes.
	if r := w.expect(http.StatusBadRequest, http.MethodPut, facility, manager, map[string]any{"max_length_minutes": 90}, nil); !contains(r.Body, w.instr.Code) || !contains(r.Body, "min_length_minutes") {
		t.Errorf("facility change that breaks an instrument's rules: %s", r.Body)
	}
	w.expect(http.StatusOK, http.MethodGet, facility, researcher, nil, &got)
	if got.Effective.MaxLengthMinutes != defaults.MaxLengthMinutes || got.Effective.HorizonDays != 120 {
		t.Errorf("facility rules after the refused change: %+v", got.Effective)
	}
	// {} returns the facility to the defaults.
	w.expect(http.StatusOK, http.MethodPut, facility, manager, map[string]any{}, &got)
	if !reflect.DeepEqual(got.Effective, defaults) {
		t.Errorf("facility rules after {}: %+v", got.Effective)
	}
}
