package postgres

import (
	"context"
	"fmt"
	"strings"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
)

const projectSelect = `
SELECT p.id::text, p.code, p.title, p.principal_investigator_id::text, p.rate_class, p.created_at, p.updated_at,
       coalesce((SELECT array_agg(m.user_id::text ORDER BY m.added_at, m.user_id) FROM project_members m WHERE m.project_id = p.id), '{}')
FROM projects p`

func scanProject(row pgx.Row) (accounts.Project, error) {
	var p accounts.Project
	var rc string
	err := row.Scan(&p.ID, &p.Code, &p.Title, &p.PrincipalInvestigatorID, &rc, &p.CreatedAt, &p.UpdatedAt, &p.MemberIDs)
	p.RateClass = accounts.RateClass(rc)
	return p, err
}

// CreateProject implements accounts.ProjectStore.
func (db *DB) CreateProject(ctx context.Context, n accounts.NewProject) (accounts.Project, error) {
	var out accounts.Project
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireUser(ctx, tx, n.PrincipalInvestigatorID, "principal_investigator_id"); err != nil {
			return err
		}
		var id string
		const q = `INSERT INTO projects (code, title, principal_investigator_id, rate_class) VALUES ($1, $2, $3, $4) RETURNING id::text`
		if err := tx.QueryRow(ctx, q, n.Code, n.Title, n.PrincipalInvestigatorID, string(n.RateClass)).Scan(&id); err != nil {
			return err
		}
		if err := addMember(ctx, tx, id, n.PrincipalInvestigatorID); err != nil {
			return err
		}
		var err error
		out, err = scanProject(tx.QueryRow(ctx, projectSelect+` WHERE p.id = $1`, id))
		return err
	})
	return out, mapError(err, "project")
}

// Project implements accounts.ProjectStore.
func (db *DB) Project(ctx context.Context, id string) (accounts.Project, error) {
	if !accounts.ValidID(id) {
		return accounts.Project{}, beamledger.NotFound("project")
	}
	p, err := scanProject(db.pool.QueryRow(ctx, projectSelect+` WHERE p.id = $1`, id))
	return p, mapError(err, "project")
}

// Projects implements accounts.ProjectStore.
func (db *DB) Projects(ctx context.Context, f accounts.ProjectFilter) ([]accounts.Project, error) {
	var conds []string
	var args []any
	if f.MemberID != "" {
		args = append(args, f.MemberID)
		conds = append(conds, fmt.Sprintf("EXISTS (SELECT 1 FROM project_members m WHERE m.project_id = p.id AND m.user_id = $%d)", len(args)))
	}
	q := projectSelect
	if len(conds) > 0 {
		q += ` WHERE ` + strings.Join(conds, " AND ")
	}
	rows, err := db.pool.Query(ctx, q+` ORDER BY p.code`, args...)
	if err != nil {
		return nil, mapError(err, "project")
	}
	ps, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (accounts.Project, error) { return scanProject(r) })
	return ps, mapError(err, "project")
}

// UpdateProject implements accounts.ProjectStore.
func (db *DB) UpdateProject(ctx context.Context, id string, p accounts.ProjectPatch) (accounts.Project, error) {
	if !accounts.ValidID(id) {
		return accounts.Project{}, beamledger.NotFound("project")
	}
	var out accounts.Project
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if p.PrincipalInvestigatorID != nil {
			if err := requireUser(ctx, tx, *p.PrincipalInvestigatorID, "principal_investigator_id"); err != nil {
				return err
			}
		}
		var rc *string
		if p.RateClass != nil {
			s := string(*p.RateClass)
			rc = &s
		}
		const q = `
UPDATE projects SET title = coalesce($2, title),
    principal_investigator_id = coalesce($3::uuid, principal_investigator_id),
    rate_class = coalesce($4, rate_class), updated_at = now()
WHERE id = $1`
		tag, err := tx.Exec(ctx, q, id, p.Title, p.PrincipalInvestigatorID, rc)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return pgx.ErrNoRows
		}
		if p.PrincipalInvestigatorID != nil {
			if err := addMember(ctx, tx, id, *p.PrincipalInvestigatorID); err != nil {
				return err
			}
		}
		out, err = scanProject(tx.QueryRow(ctx, projectSelect+` WHERE p.id = $1`, id))
		return err
	})
	return out, mapError(err, "project")
}

// AddMember implements accounts.ProjectStore.
func (db *DB) AddMember(ctx context.Context, projectID, userID string) (accounts.Project, error) {
	if !accounts.ValidID(projectID) {
		return accounts.Project{}, beamledger.NotFound("project")
	}
	var out accounts.Project
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireUser(ctx, tx, userID, "user_id"); err != nil {
			return err
		}
		var err error
		// Lock the project row so membership changes of one project apply one at a time.
		if _, err = scanProject(tx.QueryRow(ctx, projectSelect+` WHERE p.id = $1 FOR UPDATE OF p`, projectID)); err != nil {
			return err
		}
		if err := addMember(ctx, tx, projectID, userID); err != nil {
			return err
		}
		out, err = scanProject(tx.QueryRow(ctx, projectSelect+` WHERE p.id = $1`, projectID))
		return err
	})
	return out, mapError(err, "project")
}

// RemoveMember implements accounts.ProjectStore.
func (db *DB) RemoveMember(ctx context.Context, projectID, userID string) (accounts.Project, error) {
	if !accounts.ValidID(projectID) || !accounts.ValidID(userID) {
		return accounts.Project{}, beamledger.NotFound("project member")
	}
	var out accounts.Project
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		p, err := scanProject(tx.QueryRow(ctx, projectSelect+` WHERE p.id = $1 FOR UPDATE OF p`, projectID))
		if err != nil {
			return err
		}
		if p.PrincipalInvestigatorID == userID {
			return beamledger.Conflict("the principal investigator cannot be removed; name another investigator first")
		}
		tag, err := tx.Exec(ctx, `DELETE FROM project_members WHERE project_id = $1 AND user_id = $2`, projectID, userID)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return beamledger.NotFound("project member")
		}
		out, err = scanProject(tx.QueryRow(ctx, projectSelect+` WHERE p.id = $1`, projectID))
		return err
	})
	return out, mapError(err, "project")
}

func addMember(ctx context.Context, tx pgx.Tx, projectID, userID string) error {
	_, err := tx.Exec(ctx, `INSERT INTO project_members (project_id, user_id) VALUES ($1, $2) ON CONFLICT DO NOTHING`, projectID, userID)
	return err
}

// requireUser turns an unknown user id into an Invalid error naming field.
func requireUser(ctx context.Context, tx pgx.Tx, id, field string) error {
	if !accounts.ValidID(id) {
		return beamledger.InvalidField(field, "must be a user id")
	}
	var ok bool
	if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM users WHERE id = $1)`, id).Scan(&ok); err != nil {
		return err
	}
	if !ok {
		return beamledger.InvalidField(field, "no such user")
	}
	return nil
}
