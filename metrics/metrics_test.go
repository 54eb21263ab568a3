package metrics

import (
	"context"
	"errors"
	"testing"
	"time"
)

// TestJobFailures counts runs and failures apart, and keeps the time of the last
// success through a later failure.
func TestJobFailures(t *testing.T) {
	r := New(Sources{})
	ok := time.Unix(1_800_000_000, 0)
	r.JobRun("ledger_seal", ok, time.Millisecond, nil)
	r.JobRun("ledger_seal", ok.Add(time.Second), time.Millisecond, errors.New("database down"))
	got := gather(t, r)
	// [constructed: two runs, the second failing]
	if got["beamledger_job_runs_total"] != 2 || got["beamledger_job_failures_total"] != 1 {
		t.Errorf("runs %v and failures %v, want 2 and 1", got["beamledger_job_runs_total"], got["beamledger_job_failures_total"])
	}
	if got["beamledger_job_last_success_timestamp_seconds"] != 1_800_000_000 {
		t.Errorf("last success = %v, want the first run's end", got["beamledger_job_last_success_timestamp_seconds"])
	}
}

// TestLedgerUnreadable reports the ledger as down, with no stale figures, when the
// database cannot be read, and the lag from the oldest unsealed event otherwise.
func TestLedgerUnreadable(t *testing.T) {
	now := time.Unix(1_800_000_000, 0)
	var fail bool
	r := New(Sources{Now: func() time.Time { return now }, Ledger: func(context.Context) (LedgerStats, error) {
		if fail {
			return LedgerStats{}, errors.New("no database")
		}
		return LedgerStats{Size: 10, Unsealed: 2, OldestUnsealed: now.Add(-1500 * time.Millisecond)}, nil
	}})
	got := gather(t, r)
	// [constructed: the oldest unsealed event 1.5 s before the scrape]
	if got["beamledger_ledger_stats_up"] != 1 || got["beamledger_ledger_size"] != 10 || got["beamledger_ledger_sealing_lag_seconds"] != 1.5 {
		t.Errorf("readable ledger: %v", got)
	}
	fail = true
	got = gather(t, r)
	if _, has := got["beamledger_ledger_size"]; has || got["beamledger_ledger_stats_up"] != 0 {
		t.Errorf("unreadable ledger: %v", got)
	}
}

// gather reads the value of each gauge and counter family with one series.
func gather(t *testing.T, r *Registry) map[string]float64 {
	t.Helper()
	mfs, err := r.reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]float64{}
	for _, mf := range mfs {
		for _, m := range mf.GetMetric() {
			if g := m.GetGauge(); g != nil {
				out[mf.GetName()] = g.GetValue()
			} else if c := m.GetCounter(); c != nil {
				out[mf.GetName()] = c.GetValue()
			}
		}
	}
	return out
}

// TestReplicaPool reports the read replica's pool beside the primary's, under its
// own names, and no replica series without a replica.
func TestReplicaPool(t *testing.T) {
	primary := PoolStats{Acquired: 1, Total: 4, Max: 8, Acquires: 40, EmptyAcquires: 3}
	replica := PoolStats{Acquired: 2, Total: 2, Max: 4, Acquires: 7, CanceledAcquires: 1, AcquireWait: 1500 * time.Millisecond}
	got := gather(t, New(Sources{Pool: func() PoolStats { return primary }, ReplicaPool: func() PoolStats { return replica }}))
	// [constructed: the two snapshots above]
	for name, want := range map[string]float64{
		"beamledger_db_pool_acquires_total": 40, "beamledger_db_pool_empty_acquires_total": 3,
		"beamledger_db_replica_pool_acquires_total": 7, "beamledger_db_replica_pool_canceled_acquires_total": 1,
		"beamledger_db_replica_pool_acquire_wait_seconds_total": 1.5,
	} {
		if got[name] != want {
			t.Errorf("%s = %v, want %v", name, got[name], want)
		}
	}
	got = gather(t, New(Sources{Pool: func() PoolStats { return primary }}))
	if _, has := got["beamledger_db_replica_pool_acquires_total"]; has {
		t.Error("replica pool series without a replica")
	}
}
