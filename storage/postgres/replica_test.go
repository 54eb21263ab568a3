package postgres_test

import (
	"context"
	"strings"
	"testing"

	"beamledger/accounts"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// TestOpenReplica checks the reports' pool: its sessions read but never write (here
// against a primary given by mistake, which it reports as not a standby), it opens
// without waiting for a database that is down, whose reads then fail as
// unreachable, and a bad URL's error does not echo the password. Streaming from a
// real standby is tested in server (TestReportsReadTheReplica). [constructed]
func TestOpenReplica(t *testing.T) {
	ctx := context.Background()
	url := pgtest.NewDatabase(t)
	r, err := postgres.OpenReplica(ctx, url, 2)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if _, err := r.Instruments(ctx); err != nil {
		t.Errorf("a read through the replica pool: %v", err)
	}
	_, err = r.CreateUser(ctx, accounts.NewUser{Email: "nobody@example.org", DisplayName: "Nobody", Role: accounts.RoleResearcher}, "hash")
	if err == nil || !strings.Contains(err.Error(), "read-only") {
		t.Errorf("a write through the replica pool: %v, want a read-only refusal", err)
	}
	st, err := r.ReplicaStatus(ctx)
	if err != nil || st.Standby || st.ReplayLag != 0 {
		t.Errorf("ReplicaStatus of a primary = %+v, %v; want no standby, no lag", st, err)
	}

	down, err := postgres.OpenReplica(ctx, "postgres://reports@127.0.0.1:1/none?sslmode=disable&connect_timeout=2", 1)
	if err != nil {
		t.Fatalf("OpenReplica of a database that is down: %v, want a pool that connects later", err)
	}
	defer down.Close()
	if _, err := down.ReplicaStatus(ctx); err == nil || !postgres.Unreachable(err) {
		t.Errorf("ReplicaStatus of a database that is down: %v, want unreachable", err)
	}

	if _, err := postgres.OpenReplica(ctx, "postgres://reports:s3cret-pw@[bad/none", 1); err == nil || strings.Contains(err.Error(), "s3cret-pw") {
		t.Errorf("a bad URL: %v", err)
	}
}
