package postgres

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
)

const agentTokenColumns = `id::text, instrument_id::text, name, scopes, created_by::text, created_at, expires_at, revoked_at, last_used_at`

func scanAgentToken(row pgx.Row) (accounts.AgentToken, error) {
	var t accounts.AgentToken
	var scopes []string
	err := row.Scan(&t.ID, &t.InstrumentID, &t.Name, &scopes, &t.CreatedBy, &t.CreatedAt, &t.ExpiresAt, &t.RevokedAt, &t.LastUsedAt)
	for _, s := range scopes {
		t.Scopes = append(t.Scopes, accounts.Scope(s))
	}
	return t, err
}

// CreateAgentToken implements accounts.AgentTokenStore.
func (db *DB) CreateAgentToken(ctx context.Context, n accounts.NewAgentToken, createdBy string, hash []byte) (accounts.AgentToken, error) {
	if !accounts.ValidID(n.InstrumentID) {
		return accounts.AgentToken{}, beamledger.NotFound("instrument")
	}
	scopes := make([]string, len(n.Scopes))
	for i, s := range n.Scopes {
		scopes[i] = string(s)
	}
	var out accounts.AgentToken
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var ok bool
		if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM instruments WHERE id = $1)`, n.InstrumentID).Scan(&ok); err != nil {
			return err
		}
		if !ok {
			return beamledger.NotFound("instrument")
		}
		const q = `
INSERT INTO agent_tokens (instrument_id, name, token_hash, scopes, created_by, expires_at)
VALUES ($1, $2, $3, $4, $5, $6) RETURNING ` + agentTokenColumns
		var err error
		out, err = scanAgentToken(tx.QueryRow(ctx, q, n.InstrumentID, n.Name, hash, scopes, createdBy, n.ExpiresAt))
		return err
	})
	return out, mapError(err, "agent token")
}

// AgentTokens implements accounts.AgentTokenStore.
func (db *DB) AgentTokens(ctx context.Context, instrumentID string) ([]accounts.AgentToken, error) {
	if !accounts.ValidID(instrumentID) {
		return nil, beamledger.NotFound("instrument")
	}
	var ok bool
	if err := db.pool.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM instruments WHERE id = $1)`, instrumentID).Scan(&ok); err != nil {
		return nil, mapError(err, "instrument")
	}
	if !ok {
		return nil, beamledger.NotFound("instrument")
	}
	rows, err := db.pool.Query(ctx, `SELECT `+agentTokenColumns+` FROM agent_tokens WHERE instrument_id = $1 ORDER BY created_at DESC, id`, instrumentID)
	if err != nil {
		return nil, mapError(err, "agent token")
	}
	ts, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (accounts.AgentToken, error) { return scanAgentToken(r) })
	return ts, mapError(err, "agent token")
}

// RevokeAgentToken implements accounts.AgentTokenStore.
func (db *DB) RevokeAgentToken(ctx context.Context, instrumentID, id string, now time.Time) (accounts.AgentToken, error) {
	if !accounts.ValidID(instrumentID) || !accounts.ValidID(id) {
		return accounts.AgentToken{}, beamledger.NotFound("agent token")
	}
	const q = `
UPDATE agent_tokens SET revoked_at = coalesce(revoked_at, $3)
WHERE id = $1 AND instrument_id = $2 RETURNING ` + agentTokenColumns
	t, err := scanAgentToken(db.pool.QueryRow(ctx, q, id, instrumentID, now))
	return t, mapError(err, "agent token")
}

// AgentTokenByHash implements accounts.AgentTokenStore.
func (db *DB) AgentTokenByHash(ctx context.Context, hash []byte, now time.Time) (accounts.AgentToken, error) {
	const q = `SELECT ` + agentTokenColumns + ` FROM agent_tokens
WHERE token_hash = $1 AND revoked_at IS NULL AND (expires_at IS NULL OR expires_at > $2)`
	t, err := scanAgentToken(db.pool.QueryRow(ctx, q, hash, now))
	if errors.Is(err, pgx.ErrNoRows) {
		return t, beamledger.Unauthorized("agent token is not valid")
	}
	if err != nil {
		return t, mapError(err, "agent token")
	}
	// last_used_at is written at most once a minute, so a busy agent does not turn
	// every request into a write.
	if t.LastUsedAt == nil || now.Sub(*t.LastUsedAt) > time.Minute {
		if _, err := db.pool.Exec(ctx, `UPDATE agent_tokens SET last_used_at = $2 WHERE id = $1`, t.ID, now); err != nil {
			return t, mapError(err, "agent token")
		}
		t.LastUsedAt = &now
	}
	return t, nil
}
