package server

import (
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"beamledger/accounts"
)

// TestClockTwoMinutesOff runs a second server over the same database whose clock is
// two minutes ahead, as a process on a host whose time service failed would be.
// Tokens signed by either are taken by the other; records written through both
// enter one ledger that seals and audits intact whichever process seals; and the
// fast process's sweep leaves alone an upload the slow one touched a moment ago.
func TestClockTwoMinutesOff(t *testing.T) {
	w := newWorld(t)
	ctx := context.Background()
	w.srv.cfg.UploadExpiry = 10 * time.Minute
	cfg := w.srv.cfg
	fastClock := &testClock{now: w.clock.Now().Add(2 * time.Minute)}
	fast, err := New(cfg, w.db, slog.New(slog.NewJSONHandler(io.Discard, nil)), fastClock.Now)
	if err != nil {
		t.Fatal(err)
	}
	hs := httptest.NewServer(fast.Handler())
	t.Cleanup(hs.Close)
	call := func(base, method, path, token, body string) (int, string) {
		t.Helper()
		req, _ := http.NewRequest(method, base+path, strings.NewReader(body))
		req.Header.Set("Content-Type", "application/json")
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer res.Body.Close()
		b, _ := io.ReadAll(res.Body)
		return res.StatusCode, string(b)
	}

	// A token from the fast process, used on the slow one, and the other way.
	st, body := call(hs.URL, http.MethodPost, "/api/v1/auth/login", "", `{"email":"researcher@test.example","password":"`+testPassword+`"}`)
	var login tokenResponse
	if st != http.StatusOK || json.Unmarshal([]byte(body), &login) != nil {
		t.Fatalf("login on the fast process: %d %s", st, body)
	}
	if st, body := call(w.http.URL, http.MethodGet, "/api/v1/me", login.AccessToken, ""); st != http.StatusOK {
		t.Errorf("the slow process refused the fast one's token: %d %s", st, body)
	}
	if st, body := call(hs.URL, http.MethodGet, "/api/v1/me", w.tokens[accounts.RoleResearcher], ""); st != http.StatusOK {
		t.Errorf("the fast process refused the slow one's token: %d %s", st, body)
	}

	// Records through both processes, sealed by each in turn, audit intact.
	for i, base := range []string{w.http.URL, hs.URL, w.http.URL, hs.URL} {
		if st, body := call(base, http.MethodPost, "/api/v1/specimens", w.tokens[accounts.RoleResearcher],
			`{"project_id":"`+w.own.ID+`","code":"SKEW-`+string(rune('A'+i))+`"}`); st != http.StatusCreated {
			t.Fatalf("specimen through process %d: %d %s", i%2, st, body)
		}
		srv := w.srv
		if i%2 == 1 {
			srv = fast
		}
		if _, err := srv.sealLedger(ctx); err != nil {
			t.Fatalf("sealing on process %d: %v", i%2, err)
		}
	}
	rep, err := w.db.AuditLedger(ctx, w.srv.ledger.Verifier())
	if err != nil || rep.Fault != nil || rep.Events < 4 {
		t.Errorf("audit after writes and seals on both clocks: %+v %v", rep, err)
	}

	// An upload the slow process touched just now survives the fast one's sweep.
	path, _ := w.createUpload(w.tokens[accounts.RoleResearcher], 10, "filename", "skew.raw", "project_id", w.own.ID)
	if r := w.patch(path, w.tokens[accounts.RoleResearcher], 0, []byte("01234")); r.StatusCode != http.StatusNoContent {
		t.Fatalf("PATCH on the slow process: %d %s", r.StatusCode, r.Body)
	}
	if rep, ran, err := fast.CleanupUploads(ctx); err != nil || !ran || rep.Uploads != 0 {
		t.Errorf("the fast process's sweep: %+v ran=%v %v; want nothing removed", rep, ran, err)
	}
	if got := w.headOffset(path, w.tokens[accounts.RoleResearcher]); got != 5 {
		t.Errorf("the upload after the sweep: offset %d", got)
	}
	t.Logf("figure: clocks 2 min apart: tokens taken both ways (leeway %v), %d ledger events sealed by both and audited intact, no upload swept early", tokenLeeway, rep.Events)
}
