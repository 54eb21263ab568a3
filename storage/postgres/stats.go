package postgres

import "time"

// PoolStats is a snapshot of the connection pool, for the server's metrics.
type PoolStats struct {
	Acquired, Idle, Constructing, Total, Max  int32
	Acquires, EmptyAcquires, CanceledAcquires int64
	AcquireWait                               time.Duration
}

// PoolStats reads the pool's counters; it does not touch the database.
func (db *DB) PoolStats() PoolStats {
	s := db.pool.Stat()
	return PoolStats{
		Acquired: s.AcquiredConns(), Idle: s.IdleConns(), Constructing: s.ConstructingConns(),
		Total: s.TotalConns(), Max: s.MaxConns(),
		Acquires: s.AcquireCount(), EmptyAcquires: s.EmptyAcquireCount(), CanceledAcquires: s.CanceledAcquireCount(),
		AcquireWait: s.AcquireDuration(),
	}
}
