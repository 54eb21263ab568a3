package main

import (
	"bufio"
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"image/png"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"beamledger/provenance"
	"beamledger/provenance/bundle"
)

var (
	bannerURL     = regexp.MustCompile(`running at (http://[^/\s]+)/`)
	bannerAccount = regexp.MustCompile(`^\s+(manager|staff|researcher|auditor)\s+(\S+@\S+)\s+(\S+)$`)
)

type demoRun struct {
	url      string
	accounts map[string]string // email → password
	cancel   context.CancelFunc
	done     chan error
}

// startDemo runs `beamledger demo` as `make run` does, on a free port and a data
// directory of the test's, and waits for its banner.
func startDemo(t *testing.T, dataDir string) *demoRun {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	pr, pw := io.Pipe()
	d := &demoRun{accounts: map[string]string{}, cancel: cancel, done: make(chan error, 1)}
	go func() {
		d.done <- run(ctx, []string{"demo", "-data", dataDir, "-listen", "127.0.0.1:0"}, pw, io.Discard)
		pw.Close()
	}()
	sc := bufio.NewScanner(pr)
	for sc.Scan() {
		line := sc.Text()
		if m := bannerURL.FindStringSubmatch(line); m != nil {
			d.url = m[1]
		}
		if m := bannerAccount.FindStringSubmatch(line); m != nil {
			d.accounts[m[2]] = m[3]
		}
		if strings.Contains(line, "Ctrl-C") {
			break
		}
	}
	go func() { _, _ = io.Copy(io.Discard, pr) }()
	if d.url == "" {
		cancel()
		t.Fatalf("demo printed no URL; exited with %v", <-d.done)
	}
	return d
}

func (d *demoRun) stop(t *testing.T) {
	t.Helper()
	d.cancel()
	select {
	case err := <-d.done:
		if err != nil {
			t.Fatalf("demo stopped with %v", err)
		}
	case <-time.After(60 * time.Second):
		t.Fatal("demo did not stop within 60 s of Ctrl-C")
	}
}

// TestDemoServesReadyAndLogin is the `make run` promise: /readyz answers 200 and a
// printed demo account can sign in; a second run reuses the data and prints the same
// passwords.
func TestDemoServesReadyAndLogin(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a private PostgreSQL cluster")
	}
	dataDir := filepath.Join(t.TempDir(), "data")
	t.Cleanup(func() {
		// When run as root the cluster may live outside dataDir behind a link.
		if real, err := filepath.EvalSymlinks(filepath.Join(dataDir, "postgres")); err == nil {
			os.RemoveAll(real)
		}
	})
	d := startDemo(t, dataDir)
	res, err := http.Get(d.url + "/readyz")
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	if res.StatusCode != http.StatusOK {
		t.Fatalf("/readyz: %d", res.StatusCode)
	}
	for _, role := range []string{"manager", "staff", "researcher", "auditor"} {
		email := role + "@demo.example"
		pw, ok := d.accounts[email]
		if !ok {
			t.Fatalf("banner lacks %s; got %v", email, d.accounts)
		}
		if tok := login(t, d.url, email, pw); tok == "" {
			t.Fatalf("login %s gave no token", email)
		}
	}
	first := d.accounts
	d.stop(t)
	// The cluster is stopped: nothing listens on its port any more (checked by the
	// second start finding the data directory free and reusing it).
	d2 := startDemo(t, dataDir)
	defer d2.stop(t)
	for email, pw := range first {
		if d2.accounts[email] != pw {
			t.Fatalf("second run printed another password for %s", email)
		}
	}
	login(t, d2.url, "researcher@demo.example", first["researcher@demo.example"])
	var projects struct {
		Items []struct{ Code string } `json:"items"`
	}
	getJSON(t, d2.url+"/api/v1/projects", login(t, d2.url, "manager@demo.example", first["manager@demo.example"]), &projects)
	if len(projects.Items) != 3 {
		t.Fatalf("after a second load: %d projects, want the 3 demo projects once", len(projects.Items))
	}
	// A living calendar: the week holds bookings of every kind, loaded once.
	var slots struct {
		Items []struct{ Kind string } `json:"items"`
	}
	now := time.Now().UTC()
	from, to := now.AddDate(0, 0, -8).Format(time.RFC3339), now.AddDate(0, 0, 8).Format(time.RFC3339)
	getJSON(t, d2.url+"/api/v1/bookings?from="+from+"&to="+to, login(t, d2.url, "staff@demo.example", first["staff@demo.example"]), &slots)
	kinds := map[string]int{}
	for _, s := range slots.Items {
		kinds[s.Kind]++
	}
	for _, k := range []string{"independent", "assisted", "training", "unattended", "service"} {
		if kinds[k] == 0 {
			t.Errorf("demo week lacks a %s booking: %v", k, kinds)
		}
	}
	// 11 single bookings plus the series' first two Fridays inside the window (the
	// window reaches 8 days past now, so one or two of them), and last Thursday's
	// acquisition session when it falls inside the window's 8 days back.
	if n := len(slots.Items); n < 12 || n > 14 {
		t.Errorf("demo week has %d bookings, want the 11 demo bookings, the series and the session once", n)
	}

	// Last week's session on the corrected STEM: three acquisitions, the first
	// corrected, the last past the specimen's fluence budget.
	auditor := login(t, d2.url, "auditor@demo.example", first["auditor@demo.example"])
	var acqs struct {
		Items []struct {
			Version        int      `json:"version"`
			TuningID       *string  `json:"tuning_id"`
			CalibrationIDs []string `json:"calibration_ids"`
			Warnings       []string `json:"warnings"`
			Derived        struct {
				WavelengthPm float64 `json:"wavelength_pm"`
			} `json:"derived"`
		} `json:"items"`
	}
	getJSON(t, d2.url+"/api/v1/acquisitions", auditor, &acqs)
	versions, warned := 0, 0
	for _, a := range acqs.Items {
		versions += a.Version
		if len(a.Warnings) > 0 {
			warned++
		}
		if a.TuningID == nil || len(a.CalibrationIDs) != 4 || a.Derived.WavelengthPm == 0 {
			t.Errorf("demo acquisition lacks its tuning, calibrations or derived quantities: %+v", a)
		}
	}
	if len(acqs.Items) != 3 || versions != 4 || warned != 1 {
		t.Errorf("demo acquisitions: %d, versions summing to %d, %d with warnings; want 3, 4 (one corrected) and 1", len(acqs.Items), versions, warned)
	}

	// Their data files, stored on local disk, and the processed files derived from them.
	var files struct {
		Items []struct {
			ID, SHA256, FileName, MediaType string
			AcquisitionID                   *string `json:"acquisition_id"`
		} `json:"items"`
	}
	getJSON(t, d2.url+"/api/v1/files", auditor, &files)
	if len(files.Items) != 4 {
		t.Fatalf("demo files: %d, want the survey, the 4D scan and two processed files once", len(files.Items))
	}
	for _, f := range files.Items {
		if f.MediaType != "image/png" {
			continue
		}
		req, _ := http.NewRequest(http.MethodGet, d2.url+"/api/v1/files/"+f.ID+"/content", nil)
		req.Header.Set("Authorization", "Bearer "+auditor)
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		body, _ := io.ReadAll(res.Body)
		res.Body.Close()
		sum := sha256.Sum256(body)
		if _, err := png.Decode(bytes.NewReader(body)); err != nil || hex.EncodeToString(sum[:]) != f.SHA256 || res.Header.Get("ETag") != `"`+f.SHA256+`"` {
			t.Errorf("%s: not a PNG with its recorded digest (%v)", f.FileName, err)
		}
		if f.AcquisitionID == nil {
			var lin struct {
				Derivations []struct{ Software string } `json:"derivations"`
			}
			getJSON(t, d2.url+"/api/v1/files/"+f.ID+"/lineage", auditor, &lin)
			if len(lin.Derivations) != 1 {
				t.Errorf("%s: lineage %+v, want the step that made it", f.FileName, lin.Derivations)
			}
		}
	}

	// Every demo file is traced and its provenance bundle verifies offline with the
	// ledger's published key, once a signed checkpoint covers it.
	var key struct {
		VerifierKey string `json:"verifier_key"`
	}
	getJSON(t, d2.url+"/api/v1/ledger/key", auditor, &key)
	verifier, err := provenance.ParseVerifierKey(key.VerifierKey)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range files.Items {
		var tr struct {
			File struct{ ID string } `json:"file"`
		}
		getJSON(t, d2.url+"/api/v1/trace/"+f.SHA256, auditor, &tr)
		if tr.File.ID == "" {
			t.Errorf("%s: the trace names no file", f.FileName)
		}
		var zipped []byte
		waitFor(t, 30*time.Second, f.FileName+"'s bundle (once a checkpoint covers it)", func() bool {
			req, _ := http.NewRequest(http.MethodGet, d2.url+"/api/v1/trace/"+f.SHA256+"/bundle", nil)
			req.Header.Set("Authorization", "Bearer "+auditor)
			res, err := http.DefaultClient.Do(req)
			if err != nil {
				return false
			}
			defer res.Body.Close()
			zipped, _ = io.ReadAll(res.Body)
			return res.StatusCode == http.StatusOK
		})
		sum, err := bundle.Verify(bytes.NewReader(zipped), int64(len(zipped)), verifier)
		if err != nil || sum.SHA256 != f.SHA256 || sum.Events == 0 {
			t.Errorf("%s: bundle verification %+v: %v", f.FileName, sum, err)
		}
	}
}

func login(t testing.TB, base, email, pw string) string {
	t.Helper()
	body := fmt.Sprintf(`{"email":%q,"password":%q}`, email, pw)
	res, err := http.Post(base+"/api/v1/auth/login", "application/json", strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	var tok struct {
		AccessToken string `json:"access_token"`
	}
	if res.StatusCode != http.StatusOK {
		t.Fatalf("login %s: %d", email, res.StatusCode)
	}
	if err := json.NewDecoder(res.Body).Decode(&tok); err != nil {
		t.Fatal(err)
	}
	return tok.AccessToken
}

func getJSON(t testing.TB, url, token string, out any) {
	t.Helper()
	req, _ := http.NewRequest(http.MethodGet, url, nil)
	req.Header.Set("Authorization", "Bearer "+token)
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	if res.StatusCode != http.StatusOK {
		t.Fatalf("GET %s: %d", url, res.StatusCode)
	}
	if err := json.NewDecoder(res.Body).Decode(out); err != nil {
		t.Fatal(err)
	}
}

func TestServeRefusesWeakOrMissingSecrets(t *testing.T) {
	for name, env := range map[string]map[string]string{
		"no database":    {"BEAMLEDGER_JWT_SIGNING_KEY": strings.Repeat("ab", 16) + "0123456789abcdef0123456789abcdef"},
		"no signing key": {"BEAMLEDGER_DATABASE_URL": "postgres://x@127.0.0.1/x"},
		"zero key":       {"BEAMLEDGER_DATABASE_URL": "postgres://x@127.0.0.1/x", "BEAMLEDGER_JWT_SIGNING_KEY": strings.Repeat("00", 32)},
		"both forms":     {"BEAMLEDGER_DATABASE_URL": "postgres://x@127.0.0.1/x", "BEAMLEDGER_DATABASE_URL_FILE": "/nonexistent"},
	} {
		t.Run(name, func(t *testing.T) {
			for _, k := range []string{"BEAMLEDGER_DATABASE_URL", "BEAMLEDGER_DATABASE_URL_FILE", "BEAMLEDGER_JWT_SIGNING_KEY", "BEAMLEDGER_JWT_SIGNING_KEY_FILE"} {
				t.Setenv(k, "")
				os.Unsetenv(k)
			}
			for k, v := range env {
				t.Setenv(k, v)
			}
			err := run(context.Background(), []string{"serve"}, io.Discard, io.Discard)
			if err == nil {
				t.Fatal("serve started without a usable configuration")
			}
		})
	}
}

func TestSecretFromFile(t *testing.T) {
	f := filepath.Join(t.TempDir(), "url")
	if err := os.WriteFile(f, []byte("postgres://u:p@h/db\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	t.Setenv("BEAMLEDGER_DATABASE_URL_FILE", f)
	os.Unsetenv("BEAMLEDGER_DATABASE_URL")
	got, err := databaseURL()
	if err != nil || got != "postgres://u:p@h/db" {
		t.Fatalf("got %q, %v", got, err)
	}
}

func TestUnknownCommand(t *testing.T) {
	if err := run(context.Background(), []string{"frobnicate"}, io.Discard, io.Discard); err == nil {
		t.Fatal("unknown command accepted")
	}
	var out strings.Builder
	if err := run(context.Background(), []string{"version"}, &out, io.Discard); err != nil || !strings.HasPrefix(out.String(), "beamledger ") {
		t.Fatalf("version: %q %v", out.String(), err)
	}
}
