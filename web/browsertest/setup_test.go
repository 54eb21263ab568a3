package browsertest

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/json"
	"errors"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
	"beamledger/demo"
	"beamledger/deploy/chromium"
	"beamledger/provenance"
	"beamledger/server"
	"beamledger/storage/objects"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// The variables deploy/testenv sets: the browser, or why there is none.
const (
	envChromium        = "BEAMLEDGER_TEST_CHROMIUM"
	envChromiumMissing = "BEAMLEDGER_TEST_CHROMIUM_MISSING"
)

// screenshotDir collects the pages' pictures for people to look at.
const screenshotDir = "screenshots"

// site is the demo facility served over HTTP for one test.
type site struct {
	url      string
	db       *postgres.DB
	accounts map[accounts.Role]demo.Account
}

// newSite loads the demo facility (people, the week's bookings, last week's
// acquisitions and data files) into a fresh database and serves it in demo mode.
func newSite(t *testing.T) *site {
	t.Helper()
	db := pgtest.Open(t)
	ctx := context.Background()
	cfg := server.Defaults()
	cfg.Demo = true
	cfg.DatabaseURL = "postgres://unused"
	_, cfg.SigningKey, _ = ed25519.GenerateKey(nil)
	_, cfg.LedgerKey, _ = ed25519.GenerateKey(nil)
	cfg.ObjectStore, cfg.ObjectDir = "disk", t.TempDir()
	hasher := accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), cfg.HashConcurrency)
	now := time.Now()
	accts, err := demo.Load(ctx, db, hasher, []byte("browser test secret"), now)
	if err != nil {
		t.Fatalf("demo facility: %v", err)
	}
	if err := demo.LoadWeek(ctx, db, db, now); err != nil {
		t.Fatalf("demo week: %v", err)
	}
	if err := demo.LoadAcquisitions(ctx, db, db, db, now); err != nil {
		t.Fatalf("demo acquisitions: %v", err)
	}
	if err := demo.LoadBilling(ctx, db, db, db, now); err != nil {
		t.Fatalf("demo billing: %v", err)
	}
	objs, err := server.OpenObjects(cfg)
	if err != nil {
		t.Fatal(err)
	}
	put := func(ctx context.Context, digest string, data []byte) (string, error) {
		_, err := objs.Put(ctx, provenance.ObjectKey(digest), bytes.NewReader(data), int64(len(data)), objects.PutOptions{})
		return objs.Name(), err
	}
	if err := demo.LoadFiles(ctx, db, db, db, put, now); err != nil {
		t.Fatalf("demo files: %v", err)
	}
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	if testing.Verbose() {
		log = slog.New(slog.NewTextHandler(os.Stderr, nil))
	}
	srv, err := server.New(cfg, db, log, time.Now)
	if err != nil {
		t.Fatalf("server: %v", err)
	}
	hs := httptest.NewServer(srv.Handler())
	t.Cleanup(hs.Close)
	s := &site{url: hs.URL, db: db, accounts: map[accounts.Role]demo.Account{}}
	for _, a := range accts {
		if _, ok := s.accounts[a.Role]; !ok {
			s.accounts[a.Role] = a
		}
	}
	return s
}

// browserPath is the Chromium to drive. Without one the test fails: a web change
// must not pass untested because a machine lacks a browser.
func browserPath(t *testing.T) string {
	t.Helper()
	if why := os.Getenv(envChromiumMissing); why != "" {
		t.Fatalf("no headless browser for the web tests: %s", why)
	}
	if p := os.Getenv(envChromium); p != "" {
		return p
	}
	p, err := chromium.Find()
	if err != nil {
		t.Fatalf("no headless browser for the web tests (%v): run them with `make test`, which installs Debian's chromium when root, or `%s`", err, chromium.InstallCommand)
	}
	return p
}

// newBrowser starts a headless Chromium of its own for one test (its own profile,
// so no cookies are shared) and returns a tab's context.
func newBrowser(t *testing.T) context.Context {
	t.Helper()
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(browserPath(t)),
		chromedp.Flag("headless", true),
		chromedp.Flag("no-sandbox", true),
		chromedp.Flag("disable-gpu", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1280, 900),
	}
	alloc, cancelAlloc := chromedp.NewExecAllocator(context.Background(), opts...)
	browser, cancelBrowser := chromedp.NewContext(alloc, chromedp.WithErrorf(t.Logf))
	// The first call starts the browser; it must not carry the test's timeout.
	if err := chromedp.Do(browser); err != nil {
		cancelBrowser()
		cancelAlloc()
		t.Fatalf("start chromium: %v", err)
	}
	ctx, cancelTimeout := context.WithTimeout(browser, 2*time.Minute)
	t.Cleanup(func() { cancelTimeout(); cancelBrowser(); cancelAlloc() })
	watchConsole(t, browser)
	return ctx
}

// run performs browser actions, failing the test with what was being done.
func run(t *testing.T, ctx context.Context, what string, actions ...chromedp.Action[chromedp.Void]) {
	t.Helper()
	if err := chromedp.Do(ctx, actions...); err != nil {
		t.Fatalf("%s: %v", what, err)
	}
}

// eval evaluates a script in the page and returns its value.
func eval[T any](t *testing.T, ctx context.Context, what, script string) T {
	t.Helper()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](script, chromedp.EvalAwaitPromise))
	if err != nil {
		t.Fatalf("%s: %v", what, err)
	}
	return v
}

// css names an element by a CSS selector.
func css(sel string) chromedp.CSS { return chromedp.CSS(sel) }

// screenshot saves the whole page as screenshots/NAME.png.
func screenshot(t *testing.T, ctx context.Context, name string) {
	t.Helper()
	png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	if err != nil {
		t.Errorf("screenshot %s: %v", name, err)
		return
	}
	if err := os.MkdirAll(screenshotDir, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(screenshotDir, name+".png"), png, 0o644); err != nil {
		t.Fatal(err)
	}
}

// signIn fills the sign-in form as the demo account of role and waits for the
// overview.
func (s *site) signIn(t *testing.T, ctx context.Context, role accounts.Role) {
	t.Helper()
	a := s.accounts[role]
	run(t, ctx, "sign in as "+string(role),
		chromedp.Navigate(s.url+"/signin"),
		chromedp.WaitVisible(css("#sign-in-form")),
		chromedp.SendKeys(css("#email"), a.Email),
		chromedp.SendKeys(css("#password"), a.Password),
		chromedp.Click(css(`#sign-in-form button[type="submit"]`)),
		chromedp.WaitVisible(css("#viewer-role")),
	)
}

// text reads an element's text content.
func text(t *testing.T, ctx context.Context, sel string) string {
	t.Helper()
	// Read in the page, not through DOM node ids, which go stale when a page is
	// replaced between the lookup and the read.
	s, err := chromedp.Run(ctx, chromedp.Evaluate[string](`(document.querySelector(`+jsString(sel)+`) || {textContent: ""}).textContent`))
	if err != nil {
		t.Fatalf("read %s: %v", sel, err)
	}
	return strings.TrimSpace(s)
}

// waitText waits until sel's text contains want, or fails showing what it held.
func waitText(t *testing.T, ctx context.Context, sel, want string, within time.Duration) string {
	t.Helper()
	deadline := time.Now().Add(within)
	var got string
	for time.Now().Before(deadline) {
		nodes, _ := chromedp.Run(ctx, chromedp.Evaluate[int](`document.querySelectorAll(`+jsString(sel)+`).length`))
		if nodes > 0 {
			got = text(t, ctx, sel)
			if strings.Contains(got, want) {
				return got
			}
		}
		time.Sleep(100 * time.Millisecond)
	}
	t.Fatalf("%s: waited %s for %q; it reads %q", sel, within, want, got)
	return ""
}

func jsString(s string) string {
	r := strings.NewReplacer(`\`, `\\`, `"`, `\"`, "\n", `\n`)
	return `"` + r.Replace(s) + `"`
}

// retype clears a field, then types v into it key by key, as a person would.
func retype(sel, v string) chromedp.Action[chromedp.Void] {
	return chromedp.Steps(
		chromedp.Func(func(ctx context.Context, t *chromedp.Target) error {
			_, err := chromedp.Evaluate[bool](`(() => { document.querySelector(`+jsString(sel)+`).value = ""; return true; })()`)(ctx, t)
			return err
		}),
		chromedp.SendKeys(css(sel), v),
	)
}

// api calls the JSON API as role's demo account (signing in once per call, which
// is cheap next to a browser) and decodes the answer into out.
func (s *site) api(t *testing.T, role accounts.Role, method, path string, body, out any) int {
	t.Helper()
	token := ""
	if role != "" {
		var tok struct {
			AccessToken string `json:"access_token"`
		}
		a := s.accounts[role]
		if code := s.call(t, "", http.MethodPost, "/api/v1/auth/login", map[string]string{"email": a.Email, "password": a.Password}, &tok); code != http.StatusOK {
			t.Fatalf("API sign-in as %s: %d", role, code)
		}
		token = tok.AccessToken
	}
	return s.call(t, token, method, path, body, out)
}

func (s *site) call(t *testing.T, token, method, path string, body, out any) int {
	t.Helper()
	var rd io.Reader
	if body != nil {
		b, err := json.Marshal(body)
		if err != nil {
			t.Fatal(err)
		}
		rd = bytes.NewReader(b)
	}
	req, err := http.NewRequest(method, s.url+path, rd)
	if err != nil {
		t.Fatal(err)
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	b, err := io.ReadAll(res.Body)
	if err != nil {
		t.Fatal(err)
	}
	if out != nil && res.StatusCode/100 == 2 {
		if raw, ok := out.(*[]byte); ok {
			*raw = b
		} else if err := json.Unmarshal(b, out); err != nil {
			t.Fatalf("%s %s: %v in %.200s", method, path, err, b)
		}
	}
	return res.StatusCode
}

// fmtSscan reads the numbers of a sentence in order, whatever the words between.
func fmtSscan(s string, into ...*int) (int, error) {
	n := 0
	for _, f := range strings.FieldsFunc(s, func(r rune) bool { return r < '0' || r > '9' }) {
		if n == len(into) {
			break
		}
		v, err := strconv.Atoi(f)
		if err != nil {
			return n, err
		}
		*into[n] = v
		n++
	}
	if n < len(into) {
		return n, errors.New("too few numbers")
	}
	return n, nil
}

// watchConsole fails the test on any uncaught exception in a page and on anything
// the Content-Security-Policy refused: a script error or a blocked asset is a broken
// page even when the step under test happens to pass.
func watchConsole(t *testing.T, ctx context.Context) {
	t.Helper()
	var mu sync.Mutex
	var bad []string
	messages := chromedp.Console(ctx)
	go func() {
		for m, err := range messages {
			if err != nil {
				return
			}
			if m.IsException() || strings.Contains(m.Text, "Content Security Policy") || strings.Contains(m.Text, "Refused to") {
				mu.Lock()
				bad = append(bad, m.String())
				mu.Unlock()
			}
		}
	}()
	t.Cleanup(func() {
		mu.Lock()
		defer mu.Unlock()
		for _, b := range bad {
			t.Errorf("browser console: %s", b)
		}
	})
}
