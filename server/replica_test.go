package server

import (
	"bytes"
	"context"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
)

// waitReplayed waits until the replica has replayed everything the primary had
// written when it was called. The insert position, not the write position: the
// throwaway primary commits asynchronously, so a commit acknowledged to a client may
// still sit in the WAL buffers, ahead of what pg_current_wal_lsn reports.
func waitReplayed(t *testing.T, primaryURL, replicaURL string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	var lsn string
	if err := queryOnce(ctx, primaryURL, `SELECT pg_current_wal_insert_lsn()::text`, nil, &lsn); err != nil {
		t.Fatal(err)
	}
	for {
		var done bool
		err := queryOnce(ctx, replicaURL, `SELECT pg_last_wal_replay_lsn() >= $1::pg_lsn`, []any{lsn}, &done)
		if err == nil && done {
			return
		}
		select {
		case <-ctx.Done():
			t.Fatalf("the replica has not replayed up to %s within 30 s (%v)", lsn, err)
		case <-time.After(20 * time.Millisecond):
		}
	}
}

// queryOnce runs one single-row query on a connection of its own.
func queryOnce(ctx context.Context, url, sql string, args []any, dest ...any) error {
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		return err
	}
	defer conn.Close(context.WithoutCancel(ctx))
	return conn.QueryRow(ctx, sql, args...).Scan(dest...)
}

// TestReportsReadTheReplica runs a server whose read-only reports read a streaming
// replica of its database, beside one on the primary alone. The reports agree with
// each other and with REFERENCE §3's month; the replica's sessions (and only its
// sessions) carry the replica's application name; writes sent to the replica's
// server land on the primary and show in its reports once replayed. With the
// replica crashed the reports answer 503 while writes still succeed and readiness
// stays ready, naming the replica unreachable; restarted, the replica catches up.
func TestReportsReadTheReplica(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a PostgreSQL primary and a streaming replica of its own")
	}
	ctx := context.Background()
	primary := ownCluster(t, `CREATE DATABASE reports`)
	db, err := postgres.Open(ctx, primary.URL("reports"), 8)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	if _, err := db.Migrate(ctx, slog.New(slog.NewTextHandler(io.Discard, nil))); err != nil {
		t.Fatal(err)
	}
	replica, err := primary.StartReplica(ctx, "reports_standby")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = replica.Stop() })

	// w serves from the primary alone; rw is the same world served by a server
	// whose reports read the replica.
	w := newWorldOn(t, db)
	cfg, _ := testConfig(primary.URL("reports"))
	cfg.SigningKey, cfg.ObjectDir = w.key, t.TempDir()
	cfg.DatabaseReplicaURL = replica.URL("reports")
	srv, err := New(cfg, db, slog.New(slog.NewJSONHandler(io.Discard, nil)), w.clock.Now)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Close)
	rw := *w
	rw.srv, rw.http = srv, httptest.NewServer(srv.Handler())
	t.Cleanup(rw.http.Close)

	w.moveClock(at(2026, 2, 16, 9, 0))
	w.billingSetup()
	w.referenceMonth()
	w.moveClock(at(2026, 4, 1, 10, 0))
	manager, auditor := w.tokens[accounts.RoleManager], w.tokens[accounts.RoleAuditor]
	var rec scheduling.StatementRecord
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/projects/"+w.own.ID+"/statements", manager, map[string]string{"month": "2026-03"}, &rec)
	w.expect(http.StatusOK, http.MethodPost, "/api/v1/statements/"+rec.ID+"/issue", manager, nil, nil)
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/cost-entries", manager,
		map[string]any{"instrument_id": w.instr.ID, "fiscal_year": 2026, "category": "cost_pool", "amount_minor": 22400000}, nil)
	w.expect(http.StatusOK, http.MethodPut, "/api/v1/quotas", manager, map[string]any{"project_id": w.own.ID, "instrument_id": w.instr.ID,
		"period": "month", "allocated_minutes": 600}, nil)
	rw.tokens = w.tokens // signed in again by moveClock; the same key signs for both servers

	utilization := "/api/v1/reports/utilization?instrument_id=" + w.instr.ID + "&from=2026-03-01&to=2026-04-01"
	recovery := "/api/v1/reports/recovery?fiscal_year=2026"
	fairShare := "/api/v1/reports/fair-share?period=month&at=2026-03-15T12:00:00Z"
	waitReplayed(t, primary.URL("reports"), replica.URL("reports"))
	for _, path := range []string{utilization, utilization + "&format=csv", recovery, fairShare} {
		onPrimary := w.expect(http.StatusOK, http.MethodGet, path, auditor, nil, nil)
		onReplica := rw.expect(http.StatusOK, http.MethodGet, path, auditor, nil, nil)
		if !bytes.Equal(onPrimary.Body, onReplica.Body) {
			t.Errorf("%s differs:\nprimary %s\nreplica %s", path, onPrimary.Body, onReplica.Body)
		}
	}
	var util scheduling.UtilizationReport
	rw.expect(http.StatusOK, http.MethodGet, utilization, auditor, nil, &util)
	// [constructed] REFERENCE §3 month: booked 1 260 min, used 1 165 min (see
	// checkReferenceUtilization).
	if util.BookedMinutes != 1260 || util.UsedMinutes != 1165 {
		t.Errorf("utilization from the replica %+v", util.UtilizationFigures)
	}
	recoveryTotals := func(w *world) (status int, costs, charged int64) {
		t.Helper()
		var rep recoveryAnswer
		r := w.do(http.MethodGet, recovery, auditor, nil, &rep)
		for _, l := range rep.Lines {
			costs, charged = costs+l.CostsMinor, charged+l.ChargedMinor
		}
		return r.StatusCode, costs, charged
	}
	// [constructed] REFERENCE §3: 224 000.00 of costs against the 1 550.00 issued for March.
	if status, costs, charged := recoveryTotals(&rw); status != http.StatusOK || costs != 22400000 || charged != 155000 {
		t.Errorf("recovery from the replica: %d, costs %d, charged %d", status, costs, charged)
	}
	sessions := func(url string) int {
		var n int
		if err := queryOnce(ctx, url, `SELECT count(*) FROM pg_stat_activity WHERE application_name = 'beamledger-replica'`, nil, &n); err != nil {
			t.Fatal(err)
		}
		return n
	}
	if on, off := sessions(replica.URL("postgres")), sessions(primary.URL("postgres")); on == 0 || off != 0 {
		t.Errorf("beamledger-replica sessions: %d on the replica, %d on the primary; want some and none", on, off)
	}

	// A write through the replica's server goes to the primary, and its report
	// shows it once the replica has replayed it.
	entry := map[string]any{"instrument_id": w.instr.ID, "fiscal_year": 2026, "category": "service_contract", "amount_minor": 500000}
	rw.expect(http.StatusCreated, http.MethodPost, "/api/v1/cost-entries", manager, entry, nil)
	waitReplayed(t, primary.URL("reports"), replica.URL("reports"))
	if status, costs, _ := recoveryTotals(&rw); status != http.StatusOK || costs != 22900000 {
		t.Errorf("recovery from the replica after a further cost entry: %d, costs %d, want 22900000", status, costs)
	}
	var ready readiness
	rw.expect(http.StatusOK, http.MethodGet, "/readyz", "", nil, &ready)
	if ready.Status != "ready" || ready.Replica != "ok" || ready.ReplicaLagSeconds == nil {
		t.Errorf("readiness with the replica up: %+v", ready)
	}
	var alone readiness
	w.expect(http.StatusOK, http.MethodGet, "/readyz", "", nil, &alone)
	if alone.Replica != "" || alone.ReplicaLagSeconds != nil {
		t.Errorf("readiness without a replica names one: %+v", alone)
	}
	scrape := httptest.NewRecorder()
	srv.MetricsHandler().ServeHTTP(scrape, httptest.NewRequest(http.MethodGet, "/metrics", nil))
	for _, want := range []string{"beamledger_db_replica_pool_acquires_total ", "beamledger_db_pool_acquires_total ", `beamledger_db_replica_pool_connections{state="max"}`} {
		if !strings.Contains(scrape.Body.String(), want) {
			t.Errorf("metrics lack %q", want)
		}
	}

	// The replica goes down: its reports answer 503, everything else works.
	if err := replica.Crash(ctx); err != nil {
		t.Fatal(err)
	}
	for _, path := range []string{utilization, recovery, fairShare} {
		rw.expect(http.StatusServiceUnavailable, http.MethodGet, path, auditor, nil, nil)
		w.expect(http.StatusOK, http.MethodGet, path, auditor, nil, nil)
	}
	rw.expect(http.StatusCreated, http.MethodPost, "/api/v1/cost-entries", manager, entry, nil)
	rw.expect(http.StatusOK, http.MethodGet, "/api/v1/statements/"+rec.ID, auditor, nil, nil)
	var down readiness
	rw.expect(http.StatusOK, http.MethodGet, "/readyz", "", nil, &down)
	if down.Status != "ready" || down.Database != "ok" || down.Replica != "unreachable" || down.ReplicaLagSeconds != nil {
		t.Errorf("readiness with the replica down: %+v", down)
	}

	// Back, it catches up from its slot and serves again.
	if err := replica.Restart(ctx); err != nil {
		t.Fatal(err)
	}
	waitReplayed(t, primary.URL("reports"), replica.URL("reports"))
	deadline := time.Now().Add(15 * time.Second)
	for {
		status, costs, _ := recoveryTotals(&rw)
		if status == http.StatusOK && costs == 23400000 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("recovery from the restarted replica: %d, costs %d, want 23400000", status, costs)
		}
		time.Sleep(100 * time.Millisecond)
	}
}
