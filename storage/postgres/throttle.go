package postgres

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
)

// CheckLogin implements accounts.LoginThrottle.
func (db *DB) CheckLogin(ctx context.Context, key string, rule accounts.ThrottleRule, now time.Time) error {
	var failures int
	var start time.Time
	err := db.pool.QueryRow(ctx, `SELECT failures, window_start FROM login_throttle WHERE key = $1`, key).Scan(&failures, &start)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil
	}
	if err != nil {
		return mapError(err, "login throttle")
	}
	end := start.Add(rule.Window)
	if failures >= rule.MaxFailures && now.Before(end) {
		return beamledger.RateLimited("too many failed sign-ins; try again later", end.Sub(now))
	}
	return nil
}

// RecordLoginFailure implements accounts.LoginThrottle.
func (db *DB) RecordLoginFailure(ctx context.Context, key string, rule accounts.ThrottleRule, now time.Time) error {
	// One statement, so concurrent failures from several processes all count.
	const q = `
INSERT INTO login_throttle AS t (key, failures, window_start) VALUES ($1, 1, $2)
ON CONFLICT (key) DO UPDATE SET
    failures     = CASE WHEN t.window_start + $3 <= $2 THEN 1 ELSE t.failures + 1 END,
    window_start = CASE WHEN t.window_start + $3 <= $2 THEN $2 ELSE t.window_start END`
	_, err := db.pool.Exec(ctx, q, key, now, rule.Window)
	return mapError(err, "login throttle")
}

// ResetLogin implements accounts.LoginThrottle.
func (db *DB) ResetLogin(ctx context.Context, key string) error {
	_, err := db.pool.Exec(ctx, `DELETE FROM login_throttle WHERE key = $1`, key)
	return mapError(err, "login throttle")
}
