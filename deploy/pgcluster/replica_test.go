package pgcluster

import (
	"context"
	"strconv"
	"strings"
	"testing"
	"time"
)

// waitFor polls psql on dbURL until sql prints want, for up to 30 s.
func waitFor(t *testing.T, dbURL, sql, want string) {
	t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for {
		got, err := psql(t, dbURL, sql)
		if err == nil && got == want {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("%q on %s: %q (%v) after 30 s, want %q", sql, dbURL, got, err, want)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// TestStreamingReplica copies a running cluster into a hot standby, sees a write
// on the primary replayed there, checks the standby refuses writes, stops and
// restarts it (it catches up from its slot) and finally checks Stop drops the slot.
func TestStreamingReplica(t *testing.T) {
	for _, password := range []string{"", "s3cret pass"} {
		t.Run("password="+strconv.FormatBool(password != ""), func(t *testing.T) {
			primary := startCluster(t, Options{Throwaway: true, Password: password})
			ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
			defer cancel()
			mustPSQL(t, primary.URL("postgres"), `CREATE TABLE readings (n int)`)
			mustPSQL(t, primary.URL("postgres"), `INSERT INTO readings VALUES (1), (2)`)

			if _, err := primary.StartReplica(ctx, "Bad-Name"); err == nil {
				t.Error("a slot name PostgreSQL refuses was accepted")
			}
			replica, err := primary.StartReplica(ctx, "test_standby")
			if err != nil {
				t.Fatalf("StartReplica: %v", err)
			}
			t.Cleanup(func() { _ = replica.Stop() })
			if replica.Port == primary.Port || replica.RealDir == primary.RealDir {
				t.Fatalf("replica on port %d in %s, primary on %d in %s", replica.Port, replica.RealDir, primary.Port, primary.RealDir)
			}
			if got := mustPSQL(t, replica.URL("postgres"), `SELECT pg_is_in_recovery()`); got != "t" {
				t.Fatalf("replica pg_is_in_recovery() = %q", got)
			}
			waitFor(t, primary.URL("postgres"), `SELECT count(*) FROM pg_stat_replication WHERE state = 'streaming'`, "1")
			mustPSQL(t, primary.URL("postgres"), `INSERT INTO readings VALUES (3)`)
			waitFor(t, replica.URL("postgres"), `SELECT sum(n) FROM readings`, "6")
			if out, err := psql(t, replica.URL("postgres"), `INSERT INTO readings VALUES (4)`); err == nil || !strings.Contains(out, "read-only") {
				t.Errorf("a write on the replica: %v %s", err, out)
			}

			// Down for a while: the slot keeps the WAL, and the replica catches up.
			if err := replica.Crash(ctx); err != nil {
				t.Fatal(err)
			}
			mustPSQL(t, primary.URL("postgres"), `INSERT INTO readings VALUES (10)`)
			if got := mustPSQL(t, primary.URL("postgres"), `SELECT active FROM pg_replication_slots WHERE slot_name = 'test_standby'`); got != "f" {
				t.Errorf("slot active = %q with the replica down", got)
			}
			if err := replica.Restart(ctx); err != nil {
				t.Fatal(err)
			}
			waitFor(t, replica.URL("postgres"), `SELECT sum(n) FROM readings`, "16")

			if err := replica.Stop(); err != nil {
				t.Fatal(err)
			}
			if got := mustPSQL(t, primary.URL("postgres"), `SELECT count(*) FROM pg_replication_slots`); got != "0" {
				t.Errorf("%s replication slots left after the replica's Stop", got)
			}
		})
	}
}
