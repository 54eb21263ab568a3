package postgres

import (
	"context"
	"crypto/sha256"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// StatementSummary is a statement without its lines, for listings.
type StatementSummary struct {
	ID          string                     `json:"id"`
	ProjectID   string                     `json:"project_id"`
	PeriodStart time.Time                  `json:"period_start"`
	PeriodEnd   time.Time                  `json:"period_end"`
	Currency    string                     `json:"currency"`
	Status      scheduling.StatementStatus `json:"status"`
	ComputedAt  time.Time                  `json:"computed_at"`
	IssuedAt    *time.Time                 `json:"issued_at,omitempty"`
	TotalMinor  int64                      `json:"total_minor"`
}

// Statement reads a statement with its lines. ErrNotFound when there is none.
func (db *DB) Statement(ctx context.Context, id string) (scheduling.Statement, error) {
	if !accounts.ValidID(id) {
		return scheduling.Statement{}, beamledger.NotFound("statement")
	}
	st, err := readStatement(ctx, db.pool, id)
	return st, mapError(err, "statement")
}

// readStatement reads a statement's row and the ledger event it names, whose state is
// the statement's record with every line. The two must agree (the event is the one
// written with the row's present state); a disagreement is reported as an error, never
// shown.
func readStatement(ctx context.Context, q querier, id string) (scheduling.Statement, error) {
	const sql = `
SELECT s.status, s.issued_at, s.total_minor, e.entity_type, e.entity_id, e.leaf
FROM statements s JOIN ledger_events e ON e.seq = s.event_seq WHERE s.id = $1`
	var status, entityType, entityID string
	var issuedAt *time.Time
	var total int64
	var leaf []byte
	if err := q.QueryRow(ctx, sql, id).Scan(&status, &issuedAt, &total, &entityType, &entityID, &leaf); err != nil {
		return scheduling.Statement{}, err
	}
	ev, err := provenance.ParseLeaf(leaf)
	if err != nil {
		return scheduling.Statement{}, fmt.Errorf("stored statement %s: %w", id, err)
	}
	var rec scheduling.StatementRecord
	if err := json.Unmarshal(ev.State, &rec); err != nil {
		return scheduling.Statement{}, fmt.Errorf("stored statement %s: its ledger event: %w", id, err)
	}
	sameIssue := (issuedAt == nil) == (rec.IssuedAt == nil) && (issuedAt == nil || issuedAt.Equal(*rec.IssuedAt))
	if entityType != provenance.EntityStatement || entityID != id || rec.ID != id || string(rec.Status) != status ||
		rec.TotalMinor != total || !sameIssue {
		return scheduling.Statement{}, fmt.Errorf("stored statement %s: its row and the ledger event it names disagree", id)
	}
	st, err := scheduling.RestoreStatement(rec)
	if err != nil {
		return st, fmt.Errorf("stored statement %s: %w", id, err)
	}
	return st, nil
}

// Statements lists a project's statements, latest period first.
func (db *DB) Statements(ctx context.Context, projectID string) ([]StatementSummary, error) {
	if !accounts.ValidID(projectID) {
		return nil, beamledger.NotFound("project")
	}
	const q = `
SELECT id::text, project_id::text, period_start, period_end, currency, status, computed_at, issued_at, total_minor
FROM statements WHERE project_id = $1 ORDER BY period_start DESC`
	rows, err := db.pool.Query(ctx, q, projectID)
	if err != nil {
		return nil, mapError(err, "statement")
	}
	out, err := pgx.CollectRows(rows, pgx.RowToStructByPos[StatementSummary])
	if out == nil {
		out = []StatementSummary{}
	}
	return out, mapError(err, "statement")
}

// IssueStatement makes a draft final, with its ledger event holding every line; the
// statement's row then names that event.
// ErrConflict when it was issued already.
func (db *DB) IssueStatement(ctx context.Context, id, actor string, now time.Time) (scheduling.Statement, error) {
	if !accounts.ValidID(id) {
		return scheduling.Statement{}, beamledger.NotFound("statement")
	}
	var out scheduling.Statement
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `SELECT 1 FROM statements WHERE id = $1 FOR UPDATE`, id); err != nil {
			return err
		}
		st, err := readStatement(ctx, tx, id)
		if err != nil {
			return err
		}
		if out, err = st.Issue(now.UTC().Truncate(time.Microsecond)); err != nil {
			return err
		}
		ev, err := provenance.NewLedgerEvent(actor, provenance.ActionIssue, provenance.EntityStatement, id, now, out.Record())
		if err != nil {
			return err
		}
		seq, err := appendEventSeq(ctx, tx, ev)
		if err != nil {
			return err
		}
		digest := sha256.Sum256(ev.State)
		const q = `UPDATE statements SET status = 'issued', issued_at = $2, issued_by = $3, event_seq = $4, state_sha256 = $5 WHERE id = $1`
		_, err = tx.Exec(ctx, q, id, out.Record().IssuedAt, actor, seq, digest[:])
		return err
	})
	return out, mapError(err, "statement")
}

// AddAdjustment stores a manager's credit or debit (validated by the caller) with its
// ledger event. ErrConflict when the statement of the period holding its instant
// (bounds given) was issued already: the adjustment would reach no statement.
func (db *DB) AddAdjustment(ctx context.Context, projectID string, a scheduling.Adjustment, periodStart time.Time) (scheduling.Adjustment, error) {
	if !accounts.ValidID(projectID) {
		return a, beamledger.NotFound("project")
	}
	if a.CorrectsStatementID != "" && !accounts.ValidID(a.CorrectsStatementID) {
		return a, beamledger.InvalidField("corrects_statement_id", "names no statement")
	}
	a.ID, a.At = uuid.NewString(), a.At.UTC().Truncate(time.Microsecond)
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var issued bool
		err := tx.QueryRow(ctx, `SELECT status = 'issued' FROM statements WHERE project_id = $1 AND period_start = $2 FOR SHARE`, projectID, periodStart).Scan(&issued)
		if err != nil && !errors.Is(err, pgx.ErrNoRows) {
			return err
		}
		if issued {
			return beamledger.Conflict("this period's statement was issued already; the adjustment belongs in the next period")
		}
		if a.CorrectsStatementID != "" {
			var ok bool
			if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM statements WHERE id = $1 AND project_id = $2 AND status = 'issued')`,
				a.CorrectsStatementID, projectID).Scan(&ok); err != nil {
				return err
			}
			if !ok {
				return beamledger.InvalidField("corrects_statement_id", "must name an issued statement of the project")
			}
		}
		funding, err := json.Marshal(a.Funding)
		if err != nil {
			return err
		}
		const q = `
INSERT INTO adjustments (id, project_id, at, amount_minor, reason, made_by, funding, corrects_statement_id)
VALUES ($1, $2, $3, $4, $5, $6, $7, nullif($8, '')::uuid)`
		if _, err := tx.Exec(ctx, q, a.ID, projectID, a.At, a.AmountMinor, a.Reason, a.By, funding, a.CorrectsStatementID); err != nil {
			return err
		}
		return appendChange(ctx, tx, a.By, provenance.ActionCreate, provenance.EntityAdjustment, a.ID, a.At, a)
	})
	return a, mapError(err, "adjustment")
}
