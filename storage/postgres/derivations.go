package postgres

import (
	"context"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
)

var _ provenance.DerivationStore = (*DB)(nil)

const derivationColumns = `d.id::text, d.project_id::text, d.output_file_id::text,
       (SELECT array_agg(i.input_file_id::text ORDER BY i.position) FROM derivation_inputs i WHERE i.derivation_id = d.id),
       d.software, d.software_version, d.parameters, d.operator_id::text, d.performed_at, d.notes, d.recorded_by, d.created_at`

func scanDerivation(row pgx.Row) (provenance.Derivation, error) {
	var d provenance.Derivation
	err := row.Scan(&d.ID, &d.ProjectID, &d.OutputFileID, &d.InputFileIDs, &d.Software, &d.SoftwareVersion, &d.Parameters,
		&d.OperatorID, &d.PerformedAt, &d.Notes, &d.RecordedBy, &d.CreatedAt)
	return d, err
}

// lineageLock serialises derivation writes: two steps recorded at once could
// otherwise each pass the cycle check and together close a cycle. Derivations are
// rare, so one transaction-scoped advisory lock costs nothing.
const lineageLock = 0x6c696e65 // "line"

// RecordDerivation implements provenance.DerivationStore.
func (db *DB) RecordDerivation(ctx context.Context, n provenance.NewDerivation, now time.Time) (provenance.Derivation, error) {
	var out provenance.Derivation
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock($1)`, lineageLock); err != nil {
			return err
		}
		var project string
		err := tx.QueryRow(ctx, `SELECT project_id::text FROM data_files WHERE id = $1 AND status = 'stored'`, n.OutputFileID).Scan(&project)
		if errors.Is(err, pgx.ErrNoRows) {
			return beamledger.InvalidField("output_file_id", "no stored data file has this id")
		} else if err != nil {
			return err
		}
		var found int
		if err := tx.QueryRow(ctx, `SELECT count(*) FROM data_files WHERE id = ANY($1::uuid[]) AND status = 'stored'`, n.InputFileIDs).Scan(&found); err != nil {
			return err
		}
		if found != len(n.InputFileIDs) {
			return beamledger.InvalidField("input_file_ids", "each must be a stored data file")
		}
		// A cycle would close if the output is already an ancestor of an input.
		const cycle = `
WITH RECURSIVE up(file_id) AS (
    SELECT unnest($1::uuid[])
    UNION
    SELECT i.input_file_id FROM up JOIN derivations d ON d.output_file_id = up.file_id
    JOIN derivation_inputs i ON i.derivation_id = d.id
)
SELECT EXISTS (SELECT 1 FROM up WHERE file_id = $2)`
		var loops bool
		if err := tx.QueryRow(ctx, cycle, n.InputFileIDs, n.OutputFileID).Scan(&loops); err != nil {
			return err
		}
		if loops {
			return beamledger.RuleViolation("lineage_cycle", "the output is already one of its inputs' sources; a file cannot be derived from itself",
				map[string]string{"input_file_ids": "would close a cycle through output_file_id"})
		}
		const q = `
INSERT INTO derivations (project_id, output_file_id, software, software_version, parameters, operator_id, performed_at, notes, recorded_by, created_at)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10) RETURNING id::text`
		var id string
		if err := tx.QueryRow(ctx, q, project, n.OutputFileID, n.Software, n.SoftwareVersion, []byte(n.Parameters), n.OperatorID,
			n.PerformedAt, n.Notes, n.RecordedBy, now).Scan(&id); err != nil {
			if isConstraint(err, "derivations_output_file_id_key") {
				return beamledger.Conflict("that file already records the step that produced it")
			}
			if isConstraint(err, "derivations_operator_id_fkey") {
				return beamledger.InvalidField("operator_id", "no such user")
			}
			return err
		}
		const in = `INSERT INTO derivation_inputs (derivation_id, input_file_id, position) SELECT $1, f, p - 1 FROM unnest($2::uuid[]) WITH ORDINALITY AS t(f, p)`
		if _, err := tx.Exec(ctx, in, id, n.InputFileIDs); err != nil {
			return err
		}
		if out, err = scanDerivation(tx.QueryRow(ctx, `SELECT `+derivationColumns+` FROM derivations d WHERE d.id = $1`, id)); err != nil {
			return err
		}
		return appendChange(ctx, tx, n.RecordedBy, provenance.ActionCreate, provenance.EntityDerivation, id, now, out)
	})
	return out, mapError(err, "derivation")
}

// Lineage implements provenance.DerivationStore: the file's ancestors and descendants
// with the derivations that connect them.
func (db *DB) Lineage(ctx context.Context, fileID string) (provenance.Lineage, error) {
	out := provenance.Lineage{FileID: fileID, Files: []provenance.DataFile{}, Derivations: []provenance.Derivation{}}
	if !accounts.ValidID(fileID) {
		return out, beamledger.NotFound("data file")
	}
	const q = `
WITH RECURSIVE up(derivation_id, file_id) AS (
    SELECT d.id, d.output_file_id FROM derivations d WHERE d.output_file_id = $1
    UNION
    SELECT d.id, d.output_file_id FROM up JOIN derivation_inputs i ON i.derivation_id = up.derivation_id
    JOIN derivations d ON d.output_file_id = i.input_file_id
), down(derivation_id) AS (
    SELECT i.derivation_id FROM derivation_inputs i WHERE i.input_file_id = $1
    UNION
    SELECT i2.derivation_id FROM down JOIN derivations d ON d.id = down.derivation_id
    JOIN derivation_inputs i2 ON i2.input_file_id = d.output_file_id
)
SELECT ` + derivationColumns + ` FROM derivations d
WHERE d.id IN (SELECT derivation_id FROM up UNION SELECT derivation_id FROM down)
ORDER BY d.performed_at, d.id`
	rows, err := db.pool.Query(ctx, q, fileID)
	if err != nil {
		return out, mapError(err, "derivation")
	}
	ds, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Derivation, error) { return scanDerivation(r) })
	if err != nil {
		return out, mapError(err, "derivation")
	}
	ids := []string{fileID}
	for _, d := range ds {
		ids = append(ids, d.OutputFileID)
		ids = append(ids, d.InputFileIDs...)
	}
	rows, err = db.pool.Query(ctx, `SELECT `+fileColumns+` FROM data_files f WHERE f.id = ANY($1::uuid[]) ORDER BY f.created_at, f.id`, ids)
	if err != nil {
		return out, mapError(err, "data file")
	}
	fs, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.DataFile, error) { return scanFile(r) })
	if err != nil {
		return out, mapError(err, "data file")
	}
	if len(fs) == 0 {
		return out, beamledger.NotFound("data file")
	}
	out.Files, out.Derivations = fs, append(out.Derivations, ds...)
	return out, nil
}
