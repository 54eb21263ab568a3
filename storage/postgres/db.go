package postgres

import (
	"context"
	"fmt"
	"sync"
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
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		// The URL may hold a password: do not echo it.
		return nil, fmt.Errorf("database URL is not valid")
	}
	if maxConns > 0 {
		cfg.MaxConns = maxConns
	}
	cfg.ConnConfig.RuntimeParams["application_name"] = "beamledger"
	// UTC everywhere in the database session; the facility zone is applied in Go.
	cfg.ConnConfig.RuntimeParams["timezone"] = "UTC"
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

// Close releases every connection.
func (db *DB) Close() { db.pool.Close() }

// Ping checks the database answers.
func (db *DB) Ping(ctx context.Context) error { return db.pool.Ping(ctx) }
