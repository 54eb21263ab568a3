package postgres

import (
	"context"
	"encoding/hex"
	"errors"
	"fmt"
	"slices"

	"github.com/jackc/pgx/v5"
	"golang.org/x/mod/sumdb/tlog"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
)

var _ provenance.TraceStore = (*DB)(nil)

// Trace implements provenance.TraceStore. Every record it reads is append-only, so
// the reads need no common snapshot; the checkpoint is read before the events, so
// every event it covers is found sealed.
func (db *DB) Trace(ctx context.Context, fileID string) (provenance.Trace, error) {
	var t provenance.Trace
	f, err := db.DataFile(ctx, fileID)
	if err != nil {
		return t, err
	}
	if f.Status != provenance.FileStored {
		return t, beamledger.NotFound("data file")
	}
	t.SHA256, t.File, t.OtherRecords, t.Calibrations = f.SHA256, f, []string{}, []provenance.Calibration{}
	if t.Project, err = db.Project(ctx, f.ProjectID); err != nil {
		return t, err
	}
	if f.AcquisitionID != nil {
		if err := db.traceAcquisition(ctx, &t, *f.AcquisitionID); err != nil {
			return t, err
		}
	}
	if err := db.traceLineage(ctx, &t); err != nil {
		return t, err
	}
	if err := db.tracePeople(ctx, &t); err != nil {
		return t, err
	}
	return t, db.traceLedger(ctx, &t)
}

// FilesByDigest implements provenance.TraceStore. The condition on status lets the
// partial index on stored files' digests answer, however many files there are.
// Records of acquisitions come first: they say how the bytes were made.
func (db *DB) FilesByDigest(ctx context.Context, sha256Hex string, projectIDs []string) ([]provenance.DataFile, error) {
	digest, err := hex.DecodeString(sha256Hex)
	if err != nil || len(digest) != 32 {
		return nil, beamledger.InvalidField("sha256", "must be 64 hex digits")
	}
	q := `SELECT ` + fileColumns + ` FROM data_files f WHERE f.status = 'stored' AND f.sha256 = $1`
	args := []any{digest}
	if projectIDs != nil {
		q += ` AND f.project_id = ANY($2::uuid[])`
		args = append(args, projectIDs)
	}
	rows, err := db.pool.Query(ctx, q+` ORDER BY f.acquisition_id IS NULL, f.created_at, f.id LIMIT 1000`, args...)
	if err != nil {
		return nil, mapError(err, "data file")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.DataFile, error) { return scanFile(r) })
	return out, mapError(err, "data file")
}

// traceAcquisition reads the acquisition, its versions, booking, instrument,
// specimen with its fluence around the acquisition, and the tuning and
// calibrations the version in force names.
func (db *DB) traceAcquisition(ctx context.Context, t *provenance.Trace, id string) error {
	a, err := db.Acquisition(ctx, id)
	if err != nil {
		return err
	}
	vs, err := db.AcquisitionHistory(ctx, id)
	if err != nil {
		return err
	}
	t.Acquisition = &provenance.TraceAcquisition{Acquisition: a, Versions: vs}
	b, err := db.Booking(ctx, a.BookingID)
	if err != nil {
		return err
	}
	t.Booking = &b
	in, err := db.Instrument(ctx, a.InstrumentID)
	if err != nil {
		return err
	}
	t.Instrument = &in
	if a.SpecimenID != nil {
		sp, before, err := scanSpecimenBefore(db.pool.QueryRow(ctx, specimenSelectFor("$2::uuid", "$3")+` WHERE s.id = $1`,
			*a.SpecimenID, a.ID, a.StartedAt))
		if err != nil {
			return mapError(err, "specimen")
		}
		// The query leaves this acquisition out of the used fluence; the record shows
		// the specimen's whole use, as GET /specimens/{id} does.
		if a.FluenceEPerA2 != nil {
			sp.FluenceUsedEPerA2 += *a.FluenceEPerA2
		}
		sp.Acquisitions++
		t.Specimen = provenance.NewTraceSpecimen(sp, before, a.FluenceEPerA2)
	}
	if a.TuningID != nil {
		tu, err := db.Tuning(ctx, *a.TuningID)
		if err != nil {
			return err
		}
		t.Tuning = &tu
	}
	if len(a.CalibrationIDs) > 0 {
		rows, err := db.pool.Query(ctx, calibrationSelect+` WHERE c.id = ANY($1::uuid[]) ORDER BY c.kind, c.subject`, a.CalibrationIDs)
		if err != nil {
			return mapError(err, "calibration")
		}
		cs, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.Calibration, error) { return scanCalibration(r) })
		if err != nil {
			return mapError(err, "calibration")
		}
		t.Calibrations = cs
	}
	return nil
}

// traceLineage reads the derivations up and down from the file.
func (db *DB) traceLineage(ctx context.Context, t *provenance.Trace) error {
	l, err := db.Lineage(ctx, t.File.ID)
	if err != nil {
		return err
	}
	t.Upstream, t.Downstream = provenance.SplitLineage(l, t.File.ID)
	t.Files = []provenance.DataFile{}
	for _, f := range l.Files {
		if f.ID != t.File.ID {
			t.Files = append(t.Files, f)
		}
	}
	return nil
}

// tracePeople names the acquisition's operator and booked user and every
// derivation's operator.
func (db *DB) tracePeople(ctx context.Context, t *provenance.Trace) error {
	var ids []string
	if a := t.Acquisition; a != nil {
		ids = append(ids, a.OperatorID, a.UserID)
	}
	for _, d := range append(slices.Clone(t.Upstream), t.Downstream...) {
		ids = append(ids, d.OperatorID)
	}
	slices.Sort(ids)
	ids = slices.Compact(ids)
	rows, err := db.pool.Query(ctx, `SELECT `+userColumns+` FROM users WHERE id = ANY($1::uuid[]) ORDER BY display_name, id`, ids)
	if err != nil {
		return mapError(err, "user")
	}
	us, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (accounts.User, error) { return scanUser(r) })
	if err != nil {
		return mapError(err, "user")
	}
	t.People = make([]provenance.TracePerson, 0, len(us))
	for _, u := range us {
		p := provenance.PersonOf(u)
		t.People = append(t.People, p)
		if a := t.Acquisition; a != nil && u.ID == a.OperatorID {
			t.Operator = &p
		}
		if a := t.Acquisition; a != nil && u.ID == a.UserID {
			bu := p
			t.BookedUser = &bu
		}
	}
	return nil
}

// traceLedger reads the latest checkpoint, then every event of the trace's records
// in one statement, and proves each event the checkpoint covers against it.
func (db *DB) traceLedger(ctx context.Context, t *provenance.Trace) error {
	t.Ledger.Records = []provenance.TraceRecord{}
	cp, err := db.LatestCheckpoint(ctx)
	switch {
	case err == nil:
		t.Ledger.Checkpoint, t.Ledger.KeyName = &cp, cp.Origin
	case !errors.Is(err, beamledger.ErrNotFound):
		return err
	}
	refs := t.Refs()
	types, ids := make([]string, len(refs)), make([]string, len(refs))
	for i, r := range refs {
		types[i], ids[i] = r.EntityType, r.EntityID
	}
	const q = `SELECT ` + eventColumns + `
FROM ledger_events e JOIN unnest($1::text[], $2::text[]) AS r(entity_type, entity_id)
  ON e.entity_type = r.entity_type AND e.entity_id = r.entity_id
ORDER BY e.idx NULLS LAST, e.seq`
	rows, err := db.pool.Query(ctx, q, types, ids)
	if err != nil {
		return mapError(err, "ledger event")
	}
	events, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (provenance.LedgerEvent, error) { return scanEvent(r) })
	if err != nil {
		return mapError(err, "ledger event")
	}
	byRef := map[provenance.TraceRef][]provenance.TraceEvent{}
	reader := hashReader{ctx, db.pool}
	for _, e := range events {
		te := provenance.TraceEvent{LedgerEvent: e}
		if t.Ledger.Checkpoint != nil && e.Index != nil && *e.Index < cp.Size {
			p := provenance.InclusionProof{Index: *e.Index, Size: cp.Size, LeafHash: e.LeafHash(), Root: cp.Root}
			if p.Proof, err = tlog.ProveRecord(cp.Size, *e.Index, reader); err != nil {
				return fmt.Errorf("ledger event %d: %w", *e.Index, err)
			}
			te.Sealed, te.Proof = true, &p
		}
		ref := provenance.TraceRef{EntityType: e.EntityType, EntityID: e.EntityID}
		byRef[ref] = append(byRef[ref], te)
	}
	for _, r := range refs {
		evs := byRef[r]
		if evs == nil {
			evs = []provenance.TraceEvent{}
		}
		t.Ledger.Records = append(t.Ledger.Records, provenance.TraceRecord{EntityType: r.EntityType, EntityID: r.EntityID, Events: evs})
	}
	return nil
}
