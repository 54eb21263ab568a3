package postgres

import (
	"context"
	"time"
)

// ReplicaStatus is what a read replica says of itself.
type ReplicaStatus struct {
	// Standby is false when the database is not in recovery: the URL names a
	// primary, or the standby was promoted.
	Standby bool
	// ReplayLag is how far replay trails what the standby has received, measured
	// as the age of the last transaction replayed; 0 when it has replayed all it
	// received (an idle primary sends nothing, and a caught-up standby then has no
	// lag however old its last transaction).
	ReplayLag time.Duration
}

// ReplicaStatus asks the database whether it is a standby and how far its replay
// trails. On a primary it answers Standby false and no lag.
func (db *DB) ReplicaStatus(ctx context.Context) (ReplicaStatus, error) {
	var st ReplicaStatus
	var lagS float64
	err := db.pool.QueryRow(ctx, `
		SELECT pg_is_in_recovery(),
		       CASE WHEN NOT pg_is_in_recovery()
		              OR pg_last_wal_receive_lsn() IS NOT DISTINCT FROM pg_last_wal_replay_lsn() THEN 0
		            ELSE COALESCE(EXTRACT(EPOCH FROM clock_timestamp() - pg_last_xact_replay_timestamp()), 0)
		       END::float8`).Scan(&st.Standby, &lagS)
	if err != nil {
		return st, mapError(err, "replica")
	}
	st.ReplayLag = time.Duration(max(lagS, 0) * float64(time.Second))
	return st, nil
}
