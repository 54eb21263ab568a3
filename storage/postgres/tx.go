package postgres

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

// retryTx runs fn in a transaction, retrying it from the start when PostgreSQL aborts it
// to break a deadlock or a serialization conflict. Concurrent inserts checked by one
// exclusion constraint wait on each other's index entries and can deadlock; the retry
// then sees the committed winner and fails with a real conflict.
func (db *DB) retryTx(ctx context.Context, fn func(pgx.Tx) error) error {
	var err error
	for attempt := 0; attempt < 5; attempt++ {
		err = pgx.BeginFunc(ctx, db.pool, fn)
		if !retryable(err) {
			return err
		}
		select {
		case <-ctx.Done():
			return err
		case <-time.After(time.Duration(1<<attempt) * 5 * time.Millisecond):
		}
	}
	return err
}

func retryable(err error) bool {
	var pgErr *pgconn.PgError
	return errors.As(err, &pgErr) && (pgErr.Code == deadlockDetected || pgErr.Code == serializationFailure)
}
