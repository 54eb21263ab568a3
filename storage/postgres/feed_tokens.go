package postgres

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
)

var _ accounts.FeedTokenStore = (*DB)(nil)

const feedTokenColumns = `id::text, user_id::text, created_at, revoked_at`

func scanFeedToken(row pgx.Row) (accounts.FeedToken, error) {
	var t accounts.FeedToken
	err := row.Scan(&t.ID, &t.UserID, &t.CreatedAt, &t.RevokedAt)
	return t, err
}

// CreateFeedToken implements accounts.FeedTokenStore.
func (db *DB) CreateFeedToken(ctx context.Context, userID string, hash []byte) (accounts.FeedToken, error) {
	t, err := scanFeedToken(db.pool.QueryRow(ctx, `INSERT INTO feed_tokens (user_id, token_hash) VALUES ($1, $2) RETURNING `+feedTokenColumns, userID, hash))
	return t, mapError(err, "feed token")
}

// FeedTokens implements accounts.FeedTokenStore.
func (db *DB) FeedTokens(ctx context.Context, userID string) ([]accounts.FeedToken, error) {
	rows, err := db.pool.Query(ctx, `SELECT `+feedTokenColumns+` FROM feed_tokens WHERE user_id = $1 ORDER BY created_at DESC, id`, userID)
	if err != nil {
		return nil, mapError(err, "feed token")
	}
	ts, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (accounts.FeedToken, error) { return scanFeedToken(r) })
	return ts, mapError(err, "feed token")
}

// RevokeFeedToken implements accounts.FeedTokenStore.
func (db *DB) RevokeFeedToken(ctx context.Context, userID, id string, now time.Time) (accounts.FeedToken, error) {
	if !accounts.ValidID(id) {
		return accounts.FeedToken{}, beamledger.NotFound("feed token")
	}
	const q = `UPDATE feed_tokens SET revoked_at = coalesce(revoked_at, $3) WHERE id = $1 AND user_id = $2 RETURNING ` + feedTokenColumns
	t, err := scanFeedToken(db.pool.QueryRow(ctx, q, id, userID, now))
	return t, mapError(err, "feed token")
}

// FeedTokenUser implements accounts.FeedTokenStore.
func (db *DB) FeedTokenUser(ctx context.Context, hash []byte) (string, error) {
	const q = `
SELECT t.user_id::text FROM feed_tokens t JOIN users u ON u.id = t.user_id
WHERE t.token_hash = $1 AND t.revoked_at IS NULL AND NOT u.disabled`
	var id string
	err := db.pool.QueryRow(ctx, q, hash).Scan(&id)
	if errors.Is(err, pgx.ErrNoRows) {
		return "", beamledger.NotFound("feed")
	}
	return id, mapError(err, "feed token")
}
