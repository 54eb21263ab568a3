package postgres

import (
	"context"
	"errors"
	"math/rand/v2"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

// retryTx runs fn in a transaction, retrying it from the start when PostgreSQL aborts it
// to break a deadlock or a serialization conflict. Concurrent inserts checked by one
// exclusion constraint wait on each other's index entries and can deadlock; the retry
// then sees the committed winner and fails with a real conflict.
func (db *DB) retryTx(ctx context.Context, fn func(pgx.Tx) error) error {
	return retry(ctx, func() error { return pgx.BeginFunc(ctx, db.pool, fn) })
}

// retry runs fn, a statement or a transaction, again while PostgreSQL aborts it to
// break a deadlock or a serialization conflict, up to retryAttempts in all, and
// returns its last error.
func retry(ctx context.Context, fn func() error) error {
	for attempt := 0; ; attempt++ {
		err := fn()
		if !retryable(err) || !retryPause(ctx, attempt) {
			return err
		}
	}
}

// retryAttempts is how many times a write aborted by a deadlock or a serialization
// conflict is tried in all.
const retryAttempts = 7

// retryPause waits before the next attempt after a retryable abort: a random time up
// to 5 ms doubled per attempt. The randomness matters: writers that deadlocked with
// each other and came back after the same pause would meet again. false when the
// context ended or the attempts are used up.
func retryPause(ctx context.Context, attempt int) bool {
	if attempt+1 >= retryAttempts {
		return false
	}
	limit := time.Duration(1<<attempt) * 5 * time.Millisecond
	select {
	case <-ctx.Done():
		return false
	case <-time.After(limit/2 + rand.N(limit/2+1)):
		return true
	}
}

func retryable(err error) bool {
	var pgErr *pgconn.PgError
	return errors.As(err, &pgErr) && (pgErr.Code == deadlockDetected || pgErr.Code == serializationFailure)
}
