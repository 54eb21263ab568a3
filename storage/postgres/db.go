package postgres

import (
	"context"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// DB is the product's storage: a pgx pool plus the methods of every Store.
type DB struct {
	pool *pgxpool.Pool
	// offerWindow is how long a waitlist offer stays open (see SetOfferWindow).
	offerWindow time.Duration
	// zones holds the time zones loaded so far, by name (see location).
	zones sync.Map
	// kept holds rules contexts kept for booking again, keptCount how many (see
	// keepContext).
	kept      sync.Map
	keptCount atomic.Int64
}

var (
	_ accounts.UserStore         = (*DB)(nil)
	_ accounts.SessionStore      = (*DB)(nil)
	_ accounts.LoginThrottle     = (*DB)(nil)
	_ accounts.ProjectStore      = (*DB)(nil)
	_ accounts.AgentTokenStore   = (*DB)(nil)
	_ scheduling.InstrumentStore = (*DB)(nil)
)

// Open connects to the database at url and checks it answers. maxConns ≤ 0 keeps
// pgx's default.
func Open(ctx context.Context, url string, maxConns int32) (*DB, error) {
	cfg, err := poolConfig(url, maxConns, "beamledger")
	if err != nil {
		return nil, err
	}
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("connect to database: %w", err)
	}
	pingCtx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	if err := pool.Ping(pingCtx); err != nil {
		pool.Close()
		return nil, fmt.Errorf("reach database: %w", err)
	}
	return &DB{pool: pool}, nil
}

// OpenReplica opens a pool on a read replica (a streaming hot standby) for the
// read-only reports. Unlike Open it does not wait for the replica to answer: a
// server starts while its replica is down, and what reads there fails as
// unreachable until it is back. Its sessions are read-only
// (default_transaction_read_only), so a write sent there by mistake fails even when
// the URL names a primary, and carry application_name beamledger-replica, which tells
// them apart in pg_stat_activity.
func OpenReplica(ctx context.Context, url string, maxConns int32) (*DB, error) {
	cfg, err := poolConfig(url, maxConns, "beamledger-replica")
	if err != nil {
		return nil, err
	}
	cfg.ConnConfig.RuntimeParams["default_transaction_read_only"] = "on"
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("replica database: %w", err)
	}
	return &DB{pool: pool}, nil
}

// poolConfig parses url into a pool configuration whose sessions run in UTC and
// name themselves app. maxConns ≤ 0 keeps pgx's default.
func poolConfig(url string, maxConns int32, app string) (*pgxpool.Config, error) {
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		// The URL may hold a password: do not echo it.
		return nil, fmt.Errorf("database URL is not valid")
	}
	if maxConns > 0 {
		cfg.MaxConns = maxConns
	}
	cfg.ConnConfig.RuntimeParams["application_name"] = app
	// UTC everywhere in the database session; the facility zone is applied in Go.
	cfg.ConnConfig.RuntimeParams["timezone"] = "UTC"
	return cfg, nil
}

// Close releases every connection.
func (db *DB) Close() { db.pool.Close() }

// Ping checks the database answers.
func (db *DB) Ping(ctx context.Context) error { return db.pool.Ping(ctx) }
