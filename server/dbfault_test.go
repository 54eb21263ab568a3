package server

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
	"beamledger/deploy/pgcluster"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
)

// ownCluster starts a throwaway PostgreSQL cluster of the test's own, stopped when
// the test ends, and runs the admin statements in its postgres database.
func ownCluster(t *testing.T, admin ...string) *pgcluster.Cluster {
	t.Helper()
	ctx := context.Background()
	bins, err := pgcluster.FindBinaries()
	if err != nil {
		t.Fatalf("PostgreSQL binaries (make test installs them): %v", err)
	}
	cluster, err := pgcluster.Start(ctx, pgcluster.Options{Throwaway: true, Binaries: bins})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cluster.Stop() })
	conn, err := pgx.Connect(ctx, cluster.URL("postgres"))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, sql := range admin {
		if _, err := conn.Exec(ctx, sql); err != nil {
			t.Fatal(err)
		}
	}
	return cluster
}

// TestDatabaseCrashUnderLoad crashes PostgreSQL (an immediate shutdown, as a dying
// database host) while researchers book and read, keeps it down for three seconds
// and starts it again. While it is down every request that needs it is answered
// 503 with a clear message, never 500; within ten seconds of its return requests
// succeed again; and every booking answered 201 — before, during or after — is in
// the database afterwards.
func TestDatabaseCrashUnderLoad(t *testing.T) {
	if testing.Short() {
		t.Skip("starts and crashes a PostgreSQL server of its own")
	}
	ctx := context.Background()
	// A throwaway cluster acknowledges commits before their WAL is written; an
	// acknowledged booking must survive the crash, as in production.
	cluster := ownCluster(t, `ALTER SYSTEM SET synchronous_commit = on`, `SELECT pg_reload_conf()`, `CREATE DATABASE crash`)
	db, err := postgres.Open(ctx, cluster.URL("crash"), 8)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	if _, err := db.Migrate(ctx, slog.New(slog.NewTextHandler(io.Discard, nil))); err != nil {
		t.Fatal(err)
	}
	w := newWorldOn(t, db)
	every := scheduling.ClockWindow{Start: "00:00", End: "00:00"}
	horizon, maxLen, lead := 3000, 24*60, 0
	if err := db.SetFacilityRules(ctx, scheduling.RulesOverride{OpeningHours: []scheduling.ClockWindow{every},
		PrimeTime: []scheduling.ClockWindow{}, HorizonDays: &horizon, MaxLengthMinutes: &maxLen, LeadTimeMinutes: &lead}); err != nil {
		t.Fatal(err)
	}
	if _, err := db.GrantQualification(ctx, scheduling.NewQualification{UserID: w.users[accounts.RoleResearcher].ID, InstrumentID: w.instr.ID,
		Level: scheduling.LevelIndependent, Reason: "crash test", GrantedBy: w.users[accounts.RoleStaff].ID}, w.clock.Now()); err != nil {
		t.Fatal(err)
	}
	token := w.tokens[accounts.RoleResearcher]
	base := w.nextTuesday(0, 0)

	type answer struct {
		at     time.Time
		status int
		body   string
		id     string
	}
	var (
		mu      sync.Mutex
		answers []answer
		slot    atomic.Int64
		stop    = make(chan struct{})
		wg      sync.WaitGroup
	)
	for range 6 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				select {
				case <-stop:
					return
				default:
				}
				// Distinct hours, so that every refusal is the database's doing.
				start := base.Add(time.Duration(slot.Add(1)) * time.Hour)
				var created struct{ ID string }
				r := w.do(http.MethodPost, "/api/v1/bookings", token, map[string]string{"instrument_id": w.instr.ID, "project_id": w.own.ID,
					"kind": "independent", "start": start.Format(time.RFC3339), "end": start.Add(time.Hour).Format(time.RFC3339)}, &created)
				me := w.get("/api/v1/me", token, nil)
				mu.Lock()
				answers = append(answers, answer{time.Now(), r.StatusCode, string(r.Body), created.ID}, answer{time.Now(), me.StatusCode, string(me.Body), ""})
				mu.Unlock()
				time.Sleep(20 * time.Millisecond)
			}
		}()
	}
	time.Sleep(time.Second)
	crashed := time.Now()
	if err := cluster.Crash(ctx); err != nil {
		t.Fatal(err)
	}
	time.Sleep(3 * time.Second)
	if err := cluster.Restart(ctx); err != nil {
		t.Fatal(err)
	}
	back := time.Now()
	time.Sleep(12 * time.Second)
	close(stop)
	wg.Wait()

	var firstOKAfter time.Time
	var unavailable int
	var acknowledged []string
	for _, a := range answers {
		switch {
		case a.status == http.StatusCreated:
			acknowledged = append(acknowledged, a.id)
		case a.status == http.StatusServiceUnavailable:
			unavailable++
		case a.status == http.StatusOK:
		default:
			t.Errorf("answered %d at %s after the crash: %s", a.status, a.at.Sub(crashed).Round(time.Millisecond), a.body)
		}
		if a.at.After(back) && a.status < 300 && firstOKAfter.IsZero() {
			firstOKAfter = a.at
		}
	}
	if unavailable == 0 {
		t.Error("no request was answered 503 while the database was down")
	}
	if firstOKAfter.IsZero() || firstOKAfter.Sub(back) > 10*time.Second {
		t.Errorf("first success after the database returned: %v after", firstOKAfter.Sub(back))
	}
	// Every acknowledged booking is there.
	bs, err := db.Bookings(ctx, scheduling.BookingFilter{InstrumentID: w.instr.ID, From: base, To: base.Add(time.Duration(slot.Load()+2) * time.Hour)})
	if err != nil {
		t.Fatal(err)
	}
	have := map[string]bool{}
	for _, b := range bs {
		have[b.ID] = true
	}
	lost := 0
	for _, id := range acknowledged {
		if !have[id] {
			lost++
		}
	}
	if lost > 0 || len(acknowledged) == 0 {
		t.Errorf("%d of %d acknowledged bookings are missing after the crash", lost, len(acknowledged))
	}
	t.Logf("figure: PostgreSQL crashed (immediate shutdown) for 3 s under booking load: %d answers, %d bookings acknowledged and none lost, %d answered 503 and none 500; first success %v after it returned",
		len(answers), len(acknowledged), unavailable, firstOKAfter.Sub(back).Round(time.Millisecond))
}
