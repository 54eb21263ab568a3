package postgres

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
)

// CreateRefreshToken implements accounts.SessionStore.
func (db *DB) CreateRefreshToken(ctx context.Context, userID string, hash []byte, expiresAt time.Time) error {
	const q = `INSERT INTO refresh_tokens (user_id, family_id, token_hash, expires_at) VALUES ($1, gen_random_uuid(), $2, $3)`
	_, err := db.pool.Exec(ctx, q, userID, hash, expiresAt)
	return mapError(err, "refresh token")
}

var errRefreshRefused = beamledger.Unauthorized("refresh token is not valid; sign in again")

// RotateRefreshToken implements accounts.SessionStore.
func (db *DB) RotateRefreshToken(ctx context.Context, oldHash, newHash []byte, now, expiresAt time.Time) (string, error) {
	var userID string
	var replay bool
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		// FOR UPDATE serialises two concurrent refreshes with the same token: the second
		// sees used_at set and is treated as a replay.
		const sel = `
SELECT t.id, t.user_id::text, t.family_id, t.expires_at, t.used_at, t.revoked_at, u.disabled
FROM refresh_tokens t JOIN users u ON u.id = t.user_id
WHERE t.token_hash = $1
FOR UPDATE OF t`
		var id, familyID [16]byte
		var exp time.Time
		var used, revoked *time.Time
		var disabled bool
		err := tx.QueryRow(ctx, sel, oldHash).Scan(&id, &userID, &familyID, &exp, &used, &revoked, &disabled)
		if errors.Is(err, pgx.ErrNoRows) {
			return errRefreshRefused
		}
		if err != nil {
			return err
		}
		switch {
		case used != nil && revoked == nil:
			replay = true
			_, err := tx.Exec(ctx, `UPDATE refresh_tokens SET revoked_at = $2 WHERE family_id = $1 AND revoked_at IS NULL`, familyID, now)
			return err
		case used != nil, revoked != nil, !now.Before(exp), disabled:
			return errRefreshRefused
		}
		if _, err := tx.Exec(ctx, `UPDATE refresh_tokens SET used_at = $2 WHERE id = $1`, id, now); err != nil {
			return err
		}
		const ins = `INSERT INTO refresh_tokens (user_id, family_id, token_hash, expires_at) VALUES ($1, $2, $3, $4)`
		_, err = tx.Exec(ctx, ins, userID, familyID, newHash, expiresAt)
		return err
	})
	if err != nil {
		return "", mapError(err, "refresh token")
	}
	if replay {
		// The revocation above is committed; the caller is refused either way.
		return "", errRefreshRefused
	}
	return userID, nil
}

// RevokeRefreshFamily implements accounts.SessionStore.
func (db *DB) RevokeRefreshFamily(ctx context.Context, hash []byte, now time.Time) error {
	const q = `
UPDATE refresh_tokens SET revoked_at = $2
WHERE revoked_at IS NULL AND family_id = (SELECT family_id FROM refresh_tokens WHERE token_hash = $1)`
	_, err := db.pool.Exec(ctx, q, hash, now)
	return mapError(err, "refresh token")
}
