package server

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"path"
	"strconv"
	"strings"
	"testing"

	"github.com/labstack/echo/v4"

	"beamledger/accounts"
)

// scrape reads the server's metrics handler as a scraper would, with token when
// not empty, and returns the status and the samples by series ("name{labels}").
func scrape(t *testing.T, h http.Handler, token string) (int, map[string]float64) {
	t.Helper()
	req := httptest.NewRequest(http.MethodGet, "/metrics", nil)
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, req)
	samples := map[string]float64{}
	if rec.Code != http.StatusOK {
		return rec.Code, samples
	}
	sc := bufio.NewScanner(rec.Body)
	for sc.Scan() {
		line := sc.Text()
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		i := strings.LastIndexByte(line, ' ')
		v, err := strconv.ParseFloat(line[i+1:], 64)
		if err != nil {
			t.Fatalf("sample %q: %v", line, err)
		}
		samples[line[:i]] = v
	}
	return rec.Code, samples
}

// TestMetricsScrape makes requests of several routes, two uploads and a ledger seal,
// and finds each counted under its route template and status, with the database
// pool, the ledger and the background jobs beside them.
func TestMetricsScrape(t *testing.T) {
	w := newWorld(t)
	ctx := context.Background()
	researcher := w.tokens[accounts.RoleResearcher]
	h := w.srv.MetricsHandler()
	_, before := scrape(t, h, "")
	if _, err := w.srv.sealLedger(ctx); err != nil {
		t.Fatal(err)
	}
	_, sealed := scrape(t, h, "")

	for range 3 {
		w.expect(http.StatusOK, http.MethodGet, "/api/v1/me", researcher, nil, nil)
	}
	w.expect(http.StatusUnauthorized, http.MethodGet, "/api/v1/me", "", nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/instruments/"+w.instr.ID, researcher, nil, nil)
	body := bytes.Repeat([]byte("beam"), 250)
	if r := w.upload("/api/v1/files?project_id="+w.own.ID+"&name=metrics.bin", researcher, body, nil, nil); r.StatusCode != http.StatusCreated {
		t.Fatalf("upload: %d %s", r.StatusCode, r.Body)
	}
	tusPath, _ := w.createUpload(researcher, 700, "filename", "resumed.bin", "project_id", w.own.ID)
	if r := w.patch(tusPath, researcher, 0, bytes.Repeat([]byte("scan"), 175)); r.StatusCode != http.StatusNoContent {
		t.Fatalf("patch: %d %s", r.StatusCode, r.Body)
	}
	w.do(http.MethodGet, "/api/v1/no-such-thing-7f3a", researcher, nil, nil)
	code, mid := scrape(t, h, "")
	if code != http.StatusOK {
		t.Fatalf("scrape: status %d", code)
	}
	delta := func(series string) float64 { return mid[series] - before[series] }

	// Counts by route template and status [constructed: the requests made above].
	me := `{method="GET",route="/api/v1/me",status="200"}`
	for series, want := range map[string]float64{
		"beamledger_http_requests_total" + me:                                                                  3,
		`beamledger_http_requests_total{method="GET",route="/api/v1/me",status="401"}`:                         1,
		`beamledger_http_requests_total{method="GET",route="/api/v1/instruments/:instrument_id",status="200"}`: 1,
		`beamledger_http_requests_total{method="POST",route="/api/v1/files",status="201"}`:                     1,
		"beamledger_http_request_duration_seconds_count" + me:                                                  3,
		`beamledger_upload_bytes_total{route="/api/v1/files"}`:                                                 1000,
		`beamledger_upload_duration_seconds_count{outcome="ok",route="/api/v1/files"}`:                         1,
		`beamledger_upload_bytes_total{route="/api/v1/uploads/:upload_id"}`:                                    700,
	} {
		if got := delta(series); got != want {
			t.Errorf("%s grew by %v, want %v", series, got, want)
		}
	}
	if got := mid["beamledger_http_request_duration_seconds_sum"+me]; got <= 0 || got > 60 {
		t.Errorf("latency sum of /api/v1/me = %v s, want a positive time under a minute", got)
	}
	if got := mid[`beamledger_http_request_duration_seconds_bucket{method="GET",route="/api/v1/me",status="200",le="+Inf"}`]; got != mid["beamledger_http_request_duration_seconds_count"+me] {
		t.Errorf("the +Inf bucket holds %v requests, the count %v", got, mid["beamledger_http_request_duration_seconds_count"+me])
	}
	for series := range mid {
		if strings.Contains(series, w.instr.ID) || strings.Contains(series, "no-such-thing") || strings.Contains(series, path.Base(tusPath)) {
			t.Errorf("a series names a record instead of a route template: %s", series)
		}
	}

	// The pool of newWorld has 8 connections, and the requests acquired some.
	if got := mid[`beamledger_db_pool_connections{state="max"}`]; got != 8 {
		t.Errorf("pool max = %v, want 8", got)
	}
	if got := delta("beamledger_db_pool_acquires_total"); got < 5 {
		t.Errorf("pool acquisitions grew by %v over five requests", got)
	}

	// The upload appended a ledger event, not yet sealed; sealing takes it into the tree.
	if mid["beamledger_ledger_stats_up"] != 1 || mid["beamledger_ledger_unsealed_events"] < 1 || mid["beamledger_ledger_sealing_lag_seconds"] < 0 {
		t.Errorf("ledger before sealing: up %v, unsealed %v, lag %v", mid["beamledger_ledger_stats_up"],
			mid["beamledger_ledger_unsealed_events"], mid["beamledger_ledger_sealing_lag_seconds"])
	}
	if _, err := w.srv.sealLedger(ctx); err != nil {
		t.Fatal(err)
	}
	if _, _, err := w.srv.CleanupUploads(ctx); err != nil {
		t.Fatal(err)
	}
	_, after := scrape(t, h, "")
	if got, want := after["beamledger_ledger_size"], sealed["beamledger_ledger_size"]+mid["beamledger_ledger_unsealed_events"]; got != want {
		t.Errorf("ledger size after sealing = %v, want %v", got, want)
	}
	if after["beamledger_ledger_unsealed_events"] != 0 || after["beamledger_ledger_sealing_lag_seconds"] != 0 {
		t.Errorf("after sealing: unsealed %v, lag %v; want 0 and 0", after["beamledger_ledger_unsealed_events"], after["beamledger_ledger_sealing_lag_seconds"])
	}
	for _, job := range []string{jobLedgerSeal, jobUploadCleanup} {
		runs := `beamledger_job_runs_total{job="` + job + `"}`
		if got := after[runs] - before[runs]; got < 1 {
			t.Errorf("%s grew by %v", runs, got)
		}
		if after[`beamledger_job_failures_total{job="`+job+`"}`] != 0 {
			t.Errorf("job %s counted failures", job)
		}
		if after[`beamledger_job_last_success_timestamp_seconds{job="`+job+`"}`] <= 0 {
			t.Errorf("job %s has no last success", job)
		}
	}
}

// TestMetricsToken refuses a scrape without the configured token or with another.
func TestMetricsToken(t *testing.T) {
	w := newWorld(t)
	w.srv.cfg.MetricsToken = "scrape-token-0123456789"
	h := w.srv.MetricsHandler()
	for _, token := range []string{"", "scrape-token-012345678", "scrape-token-0123456789x"} {
		if code, samples := scrape(t, h, token); code != http.StatusUnauthorized || len(samples) != 0 {
			t.Errorf("scrape with token %q: status %d and %d samples, want 401 and none", token, code, len(samples))
		}
	}
	if code, samples := scrape(t, h, "scrape-token-0123456789"); code != http.StatusOK || len(samples) == 0 {
		t.Errorf("scrape with the token: status %d, %d samples", code, len(samples))
	}
}

// TestErrorLogsCarryRequestID logs from below a handler with only the request's
// context.Context, as storage and cleanup code do, and finds the id the client was
// given in the record, once.
func TestErrorLogsCarryRequestID(t *testing.T) {
	var buf bytes.Buffer
	log := slog.New(requestIDLogHandler{slog.NewJSONHandler(&buf, nil)})
	e := echo.New()
	e.Use(withRequestID)
	e.GET("/fails", func(c echo.Context) error {
		log.ErrorContext(c.Request().Context(), "store failed")
		log.WarnContext(c.Request().Context(), "already named", slog.String("request_id", requestID(c)))
		return c.NoContent(http.StatusNoContent)
	})
	req := httptest.NewRequest(http.MethodGet, "/fails", nil)
	req.Header.Set(requestIDHeader, "client-chosen-id-42")
	e.ServeHTTP(httptest.NewRecorder(), req)
	lines := strings.Split(strings.TrimSpace(buf.String()), "\n")
	if len(lines) != 2 {
		t.Fatalf("logged %q", buf.String())
	}
	for _, l := range lines {
		var rec map[string]any
		if err := json.Unmarshal([]byte(l), &rec); err != nil {
			t.Fatal(err)
		}
		if rec["request_id"] != "client-chosen-id-42" || strings.Count(l, `"request_id"`) != 1 {
			t.Errorf("record %s: want request_id client-chosen-id-42 once", l)
		}
	}
	buf.Reset()
	log.Error("outside any request")
	if strings.Contains(buf.String(), "request_id") {
		t.Errorf("a record outside requests named one: %s", buf.String())
	}
}

// TestMetricsSettings accepts a separate metrics address with or without a token and
// refuses a malformed address, the API's own address and a short token, naming the
// setting.
func TestMetricsSettings(t *testing.T) {
	ok := validConfig(t)
	ok.MetricsListen, ok.MetricsToken = "127.0.0.1:9090", "a-scrape-token-of-24-chars"
	if err := ok.Validate(); err != nil {
		t.Errorf("metrics on 127.0.0.1:9090 with a token: %v", err)
	}
	for want, change := range map[string]func(*Config){
		"metrics listen address":   func(c *Config) { c.MetricsListen = "9090" },
		"must differ from the API": func(c *Config) { c.MetricsListen = c.ListenAddr },
		"BEAMLEDGER_METRICS_TOKEN": func(c *Config) { c.MetricsListen, c.MetricsToken = "127.0.0.1:9090", "short" },
	} {
		c := validConfig(t)
		change(&c)
		if err := c.Validate(); err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("Validate() = %v, want an error naming %q", err, want)
		}
	}
}
