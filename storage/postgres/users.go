package postgres

import (
	"context"
	"fmt"
	"strings"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
)

const userColumns = `id::text, email, display_name, coalesce(orcid, ''), role, disabled, created_at, updated_at`

func scanUser(row pgx.Row) (accounts.User, error) {
	var u accounts.User
	var role string
	err := row.Scan(&u.ID, &u.Email, &u.DisplayName, &u.ORCID, &role, &u.Disabled, &u.CreatedAt, &u.UpdatedAt)
	u.Role = accounts.Role(role)
	return u, err
}

// CreateUser implements accounts.UserStore.
func (db *DB) CreateUser(ctx context.Context, u accounts.NewUser, passwordHash string) (accounts.User, error) {
	const q = `
INSERT INTO users (email, display_name, orcid, role, password_hash)
VALUES ($1, $2, nullif($3, ''), $4, $5)
RETURNING ` + userColumns
	out, err := scanUser(db.pool.QueryRow(ctx, q, u.Email, u.DisplayName, u.ORCID, string(u.Role), passwordHash))
	return out, mapError(err, "user")
}

// User implements accounts.UserStore.
func (db *DB) User(ctx context.Context, id string) (accounts.User, error) {
	if !accounts.ValidID(id) {
		return accounts.User{}, mapError(pgx.ErrNoRows, "user")
	}
	const q = `SELECT ` + userColumns + ` FROM users WHERE id = $1`
	u, err := scanUser(db.pool.QueryRow(ctx, q, id))
	return u, mapError(err, "user")
}

// Users implements accounts.UserStore.
func (db *DB) Users(ctx context.Context, f accounts.UserFilter) ([]accounts.User, error) {
	var conds []string
	var args []any
	if f.Role != "" {
		args = append(args, string(f.Role))
		conds = append(conds, fmt.Sprintf("role = $%d", len(args)))
	}
	if !f.IncludeDisabled {
		conds = append(conds, "NOT disabled")
	}
	q := `SELECT ` + userColumns + ` FROM users`
	if len(conds) > 0 {
		q += ` WHERE ` + strings.Join(conds, " AND ")
	}
	q += ` ORDER BY email`
	rows, err := db.pool.Query(ctx, q, args...)
	if err != nil {
		return nil, mapError(err, "user")
	}
	users, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (accounts.User, error) { return scanUser(r) })
	return users, mapError(err, "user")
}

// CredentialsByEmail implements accounts.UserStore.
func (db *DB) CredentialsByEmail(ctx context.Context, email string) (accounts.Credentials, error) {
	const q = `SELECT ` + userColumns + `, password_hash FROM users WHERE email = $1`
	var c accounts.Credentials
	var role string
	u := &c.User
	err := db.pool.QueryRow(ctx, q, email).Scan(&u.ID, &u.Email, &u.DisplayName, &u.ORCID, &role, &u.Disabled,
		&u.CreatedAt, &u.UpdatedAt, &c.PasswordHash)
	u.Role = accounts.Role(role)
	return c, mapError(err, "user")
}

// UpdateUser implements accounts.UserStore.
func (db *DB) UpdateUser(ctx context.Context, id string, p accounts.UserPatch) (accounts.User, error) {
	if !accounts.ValidID(id) {
		return accounts.User{}, mapError(pgx.ErrNoRows, "user")
	}
	var out accounts.User
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		// The CASE keeps one statement for every combination of fields; a NULL argument
		// means "unchanged". Disabling moves the token version on.
		const q = `
UPDATE users SET
    display_name  = coalesce($2, display_name),
    orcid         = CASE WHEN $3::text IS NULL THEN orcid ELSE nullif($3, '') END,
    role          = coalesce($4, role),
    disabled      = coalesce($5, disabled),
    token_version = token_version + CASE WHEN $5::boolean AND NOT disabled THEN 1 ELSE 0 END,
    updated_at    = now()
WHERE id = $1
RETURNING ` + userColumns
		var role *string
		if p.Role != nil {
			r := string(*p.Role)
			role = &r
		}
		var err error
		out, err = scanUser(tx.QueryRow(ctx, q, id, p.DisplayName, p.ORCID, role, p.Disabled))
		if err != nil {
			return err
		}
		if out.Disabled {
			return revokeUserSessions(ctx, tx, id)
		}
		return nil
	})
	return out, mapError(err, "user")
}

// SetPasswordHash implements accounts.UserStore.
func (db *DB) SetPasswordHash(ctx context.Context, id, hash string, revokeSessions bool) error {
	if !accounts.ValidID(id) {
		return mapError(pgx.ErrNoRows, "user")
	}
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		const q = `
UPDATE users SET password_hash = $2, updated_at = now(),
    token_version = token_version + CASE WHEN $3 THEN 1 ELSE 0 END
WHERE id = $1`
		tag, err := tx.Exec(ctx, q, id, hash, revokeSessions)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return pgx.ErrNoRows
		}
		if revokeSessions {
			return revokeUserSessions(ctx, tx, id)
		}
		return nil
	})
	return mapError(err, "user")
}

// AuthState implements accounts.UserStore.
func (db *DB) AuthState(ctx context.Context, id string) (accounts.AuthState, error) {
	var s accounts.AuthState
	if !accounts.ValidID(id) {
		return s, mapError(pgx.ErrNoRows, "user")
	}
	var role string
	err := db.pool.QueryRow(ctx, `SELECT role, disabled, token_version FROM users WHERE id = $1`, id).
		Scan(&role, &s.Disabled, &s.TokenVersion)
	s.Role = accounts.Role(role)
	return s, mapError(err, "user")
}

func revokeUserSessions(ctx context.Context, tx pgx.Tx, userID string) error {
	_, err := tx.Exec(ctx, `UPDATE refresh_tokens SET revoked_at = now() WHERE user_id = $1 AND revoked_at IS NULL`, userID)
	return err
}
