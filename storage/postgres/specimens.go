package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
)

var _ provenance.SpecimenStore = (*DB)(nil)

// specimenSelect reads specimens with the fluence used on them: the newest version of
// each acquisition that names the specimen, counted once.
var specimenSelect = specimenSelectFor("NULL::uuid", "NULL::timestamptz")

// specimenSelectFor is specimenSelect leaving out one acquisition (the one being
// recorded or corrected, whose new version replaces its old fluence), with one more
// column: the fluence of the acquisitions that started before an instant. Both are
// given as placeholders.
func specimenSelectFor(acquisition, before string) string {
	return `
SELECT s.id::text, s.project_id::text, s.code, s.description, s.fluence_budget_e_per_a2,
       coalesce(u.used, 0), coalesce(u.n, 0), s.created_by::text, s.created_at, coalesce(u.before, 0)
FROM specimens s
LEFT JOIN LATERAL (
    SELECT sum(v.fluence_e_per_a2) AS used, count(*) AS n,
           sum(v.fluence_e_per_a2) FILTER (WHERE v.started_at < ` + before + `) AS before
    FROM acquisition_versions v
    WHERE v.specimen_id = s.id AND v.acquisition_id IS DISTINCT FROM ` + acquisition + `
      AND v.version = (SELECT max(l.version) FROM acquisition_versions l WHERE l.acquisition_id = v.acquisition_id)
) u ON true`
}

func scanSpecimen(row pgx.Row) (provenance.Specimen, error) {
	s, _, err := scanSpecimenBefore(row)
	return s, err
}

// scanSpecimenBefore reads a row of specimenSelectFor, with its last column: the
// fluence of the acquisitions that started before the instant asked about.
func scanSpecimenBefore(row pgx.Row) (provenance.Specimen, float64, error) {
	var s provenance.Specimen
	var before float64
	err := row.Scan(&s.ID, &s.ProjectID, &s.Code, &s.Description, &s.FluenceBudgetEPerA2,
		&s.FluenceUsedEPerA2, &s.Acquisitions, &s.CreatedBy, &s.CreatedAt, &before)
	return s, before, err
}

// CreateSpecimen implements provenance.SpecimenStore.
func (db *DB) CreateSpecimen(ctx context.Context, n provenance.NewSpecimen, now time.Time) (provenance.Specimen, error) {
	const q = `
WITH s AS (
    INSERT INTO specimens (project_id, code, description, fluence_budget_e_per_a2, created_by, created_at)
    VALUES ($1, $2, $3, $4, $5, $6) RETURNING *
)
SELECT id::text, project_id::text, code, description, fluence_budget_e_per_a2, 0::float8, 0, created_by::text, created_at, 0::float8 FROM s`
	var sp provenance.Specimen
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var err error
		if sp, err = scanSpecimen(tx.QueryRow(ctx, q, n.ProjectID, n.Code, n.Description, n.FluenceBudgetEPerA2, n.CreatedBy, now)); err != nil {
			return err
		}
		return appendChange(ctx, tx, n.CreatedBy, provenance.ActionCreate, provenance.EntitySpecimen, sp.ID, now, sp)
	})
	if isConstraint(err, "specimens_project_id_code_key") {
		return sp, beamledger.Conflict("the project already has a specimen coded %s", n.Code)
	}
	if isConstraint(err, "specimens_project_id_fkey") {
		return sp, beamledger.InvalidField("project_id", "no such project")
	}
	return sp, mapError(err, "specimen")
}

// Specimen implements provenance.SpecimenStore.
func (db *DB) Specimen(ctx context.Context, id string) (provenance.Specimen, error) {
	if !accounts.ValidID(id) {
		return provenance.Specimen{}, beamledger.NotFound("specimen")
	}
	sp, err := scanSpecimen(db.pool.QueryRow(ctx, specimenSelect+` WHERE s.id = $1`, id))
	return sp, mapError(err, "specimen")
}

// Specimens implements provenance.SpecimenStore.
func (db *DB) Specimens(ctx context.Context, f provenance.SpecimenFilter) ([]provenance.Specimen, error) {
	var w filter
	if err := w.ids([2]string{"s.project_id", f.ProjectID}); err != nil {
		return nil, err
	}
	if f.ProjectIDs != nil {
		w.where("s.project_id = ANY(" + w.arg(f.ProjectIDs) + "::uuid[])")
	}
	rows, err := db.pool.Query(ctx, specimenSelect+w.sql()+` ORDER BY s.code, s.project_id LIMIT 1000`, w.args...)
	if err != nil {
		return nil, mapError(err, "specimen")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Specimen, error) { return scanSpecimen(r) })
	return out, mapError(err, "specimen")
}
