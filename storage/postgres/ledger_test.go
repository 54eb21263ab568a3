package postgres_test

import (
	"context"
	"crypto/ed25519"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

func newLedgerSigner(t testing.TB) *provenance.CheckpointSigner {
	t.Helper()
	_, key, err := ed25519.GenerateKey(nil)
	if err != nil {
		t.Fatal(err)
	}
	s, err := provenance.NewCheckpointSigner("ledger.test.example", key)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func countEvents(t *testing.T, conn *pgx.Conn) int {
	t.Helper()
	var n int
	if err := conn.QueryRow(context.Background(), `SELECT count(*) FROM ledger_events`).Scan(&n); err != nil {
		t.Fatal(err)
	}
	return n
}

// oneEvent returns an entity's only event, failing unless there is exactly one with
// the action given.
func oneEvent(t *testing.T, db *postgres.DB, entityType, entityID, action string) provenance.LedgerEvent {
	t.Helper()
	evs, err := db.EventsFor(context.Background(), entityType, entityID)
	if err != nil || len(evs) != 1 {
		t.Fatalf("events for %s %s = %d, %v; want one", entityType, entityID, len(evs), err)
	}
	if evs[0].Action != action {
		t.Fatalf("%s %s: action %q, want %q", entityType, entityID, evs[0].Action, action)
	}
	return evs[0]
}

// TestLedgerEventsForEveryChange makes one change of every kind hooked so far and
// checks each appended one event holding the new state, unsealed until a seal gives
// it an index that proves into the signed tree.
func TestLedgerEventsForEveryChange(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	spEv := oneEvent(t, db, provenance.EntitySpecimen, w.specimen.ID, provenance.ActionCreate)
	var state provenance.Specimen
	if err := json.Unmarshal(spEv.State, &state); err != nil || state.Code != "GB-7" || spEv.Actor != w.user.ID || !spEv.At.Equal(t0) {
		t.Errorf("specimen event %+v: state %+v, %v", spEv, state, err)
	}
	if spEv.Sealed() {
		t.Error("an event is sealed before any seal ran")
	}

	coeffs := []provenance.Coefficient{{Name: "C3", Order: 3, MagnitudeM: 1e-6, Text: "1 µm"}}
	tu, err := db.RecordTuning(ctx, provenance.NewTuning{InstrumentID: w.inst.ID, MeasuredAt: t0, RecordedBy: w.user.ID, Coefficients: coeffs}, t0)
	if err != nil {
		t.Fatal(err)
	}
	fix, err := db.RecordTuning(ctx, provenance.NewTuning{InstrumentID: w.inst.ID, MeasuredAt: t0, RecordedBy: w.user.ID, Coefficients: coeffs,
		Corrects: &tu.ID, CorrectionReason: ptr("sign")}, t0)
	if err != nil {
		t.Fatal(err)
	}
	nominal, measured := 0.08, 0.079
	cal, err := db.RecordCalibration(ctx, provenance.NewCalibration{InstrumentID: w.inst.ID, Kind: provenance.CalibrationCameraLength,
		EffectiveFrom: t0.Add(-time.Hour), NominalCameraLengthM: &nominal, CameraLengthM: &measured, RecordedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}
	a, _ := w.create(t, 3)
	if _, err := db.CorrectAcquisition(ctx, a.ID, provenance.NewAcquisition{
		Input:    provenance.AcquisitionInput{SpecimenID: w.specimen.ID, StartedAt: w.start.Add(10 * time.Minute), Reason: "r"},
		VoltageV: 300e3, Actor: w.user.ID, Now: t0.Add(time.Minute),
	}, func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
		d := draft(ac, 4)
		d.Reason = "r"
		return d, nil
	}); err != nil {
		t.Fatal(err)
	}
	in, out := w.file(t, a.ID, "raw"), w.file(t, a.ID, "processed")
	w.file(t, a.ID, "raw") // the same bytes again: no new record, so no event
	d, err := db.RecordDerivation(ctx, provenance.NewDerivation{OutputFileID: out.ID, InputFileIDs: []string{in.ID}, Software: "s",
		SoftwareVersion: "1", Parameters: json.RawMessage(`{"k":1}`), OperatorID: w.user.ID, PerformedAt: t0, RecordedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}

	oneEvent(t, db, provenance.EntityTuning, tu.ID, provenance.ActionCreate)
	fixEv := oneEvent(t, db, provenance.EntityTuning, fix.ID, provenance.ActionCorrect)
	if !strings.Contains(string(fixEv.State), `"corrects":"`+tu.ID+`"`) {
		t.Errorf("correction state %s does not name what it corrects", fixEv.State)
	}
	oneEvent(t, db, provenance.EntityCalibration, cal.ID, provenance.ActionCreate)
	oneEvent(t, db, provenance.EntityDataFile, in.ID, provenance.ActionCreate)
	oneEvent(t, db, provenance.EntityDataFile, out.ID, provenance.ActionCreate)
	oneEvent(t, db, provenance.EntityDerivation, d.ID, provenance.ActionCreate)
	acqEvs, err := db.EventsFor(ctx, provenance.EntityAcquisition, a.ID)
	if err != nil || len(acqEvs) != 2 || acqEvs[0].Action != provenance.ActionCreate || acqEvs[1].Action != provenance.ActionCorrect ||
		!strings.Contains(string(acqEvs[1].State), `"version":2`) {
		t.Fatalf("acquisition events = %+v, %v; want create then correct at version 2", acqEvs, err)
	}
	const total = 10 // instrument, specimen, two tunings, calibration, acquisition twice, two files, derivation
	if n := countEvents(t, conn); n != total {
		t.Fatalf("%d events, want %d (one per change)", n, total)
	}
	if n, oldest, err := db.UnsealedEvents(ctx); err != nil || n != total || oldest == nil {
		t.Fatalf("UnsealedEvents = %d, %v, %v; want all %d", n, oldest, err, total)
	}
	if _, err := db.LedgerEvent(ctx, 0); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("LedgerEvent(0) before sealing: %v, want not found", err)
	}

	s := newLedgerSigner(t)
	head, err := db.SealLedger(ctx, s, t0)
	if err != nil || head.Size != total {
		t.Fatalf("SealLedger = %+v, %v", head, err)
	}
	if n, oldest, _ := db.UnsealedEvents(ctx); n != 0 || oldest != nil {
		t.Errorf("after sealing: %d unsealed", n)
	}
	cp, err := db.LatestCheckpoint(ctx)
	if err != nil {
		t.Fatal(err)
	}
	opened, err := provenance.OpenCheckpoint([]byte(cp.Note), s.Verifier())
	if err != nil || opened.Size != total || opened.Root != head.Root {
		t.Fatalf("checkpoint %+v: %v", opened, err)
	}
	sealed := oneEvent(t, db, provenance.EntityDerivation, d.ID, provenance.ActionCreate)
	if !sealed.Sealed() {
		t.Fatal("derivation event still unsealed after the seal")
	}
	byIndex, err := db.LedgerEvent(ctx, *sealed.Index)
	if err != nil || byIndex.Seq != sealed.Seq || !byIndex.SameFields(sealed) {
		t.Fatalf("LedgerEvent(%d) = %+v, %v", *sealed.Index, byIndex, err)
	}
	for i := int64(0); i < total; i++ {
		ev, err := db.LedgerEvent(ctx, i)
		if err != nil {
			t.Fatal(err)
		}
		p, err := db.InclusionProof(ctx, i, total)
		if err != nil {
			t.Fatal(err)
		}
		if p.LeafHash != ev.LeafHash() || p.Root != cp.Root || p.Check() != nil {
			t.Errorf("inclusion proof of %d does not check against the checkpoint", i)
		}
	}
	rep, err := db.AuditLedger(ctx, s.Verifier())
	if err != nil || rep.Fault != nil || rep.Events != total || rep.Checkpoints != 1 {
		t.Fatalf("audit = %+v, %v", rep, err)
	}
}

// TestLedgerRolledBackChangeLeavesNoEvent makes changes fail after their event was
// written (a deferred constraint that refuses at COMMIT) and before (a conflict), and
// checks the ledger holds events only of what was committed.
func TestLedgerRolledBackChangeLeavesNoEvent(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	// A trigger checked at COMMIT, after CreateSpecimen has inserted both the
	// specimen and its event: the commit fails and must take the event with it.
	for _, stmt := range []string{
		`CREATE CONSTRAINT TRIGGER refuse_at_commit AFTER INSERT ON specimens DEFERRABLE INITIALLY DEFERRED
		 FOR EACH ROW WHEN (NEW.code = 'FAIL-AT-COMMIT') EXECUTE FUNCTION refuse_change()`,
	} {
		if _, err := conn.Exec(ctx, stmt); err != nil {
			t.Fatal(err)
		}
	}
	before := countEvents(t, conn)
	_, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: w.project.ID, Code: "FAIL-AT-COMMIT", CreatedBy: w.user.ID}, t0)
	if err == nil {
		t.Fatal("the specimen refused at commit was accepted")
	}
	if _, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: w.project.ID, Code: "GB-7", CreatedBy: w.user.ID}, t0); !errors.Is(err, beamledger.ErrConflict) {
		t.Fatalf("duplicate code: %v", err)
	}
	if _, err := db.CorrectAcquisition(ctx, "00000000-0000-4000-8000-000000000000", provenance.NewAcquisition{Actor: w.user.ID, Now: t0},
		func(ac provenance.AcquisitionContext) (provenance.Draft, error) { return draft(ac, 1), nil }); err == nil {
		t.Fatal("correction of an unknown acquisition accepted")
	}
	if n := countEvents(t, conn); n != before {
		t.Fatalf("%d events after three refused changes, want %d", n, before)
	}
	var leftovers int
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM ledger_events WHERE convert_from(leaf, 'UTF8') LIKE '%FAIL-AT-COMMIT%'`).Scan(&leftovers); err != nil || leftovers != 0 {
		t.Fatalf("events of the rolled-back specimen: %d, %v", leftovers, err)
	}
	// The control: the same path with a code the trigger lets through commits both.
	ok, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: w.project.ID, Code: "PASS-AT-COMMIT", CreatedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}
	if n := countEvents(t, conn); n != before+1 {
		t.Fatalf("%d events after one committed change, want %d", n, before+1)
	}
	oneEvent(t, db, provenance.EntitySpecimen, ok.ID, provenance.ActionCreate)
}

// TestLedgerTablesAreAppendOnly checks the triggers: nothing in the ledger can be
// changed or removed through SQL, and an index, once set, stays.
func TestLedgerTablesAreAppendOnly(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	newAcqWorld(t, db, nil)
	if _, err := db.SealLedger(ctx, newLedgerSigner(t), t0); err != nil {
		t.Fatal(err)
	}
	for _, stmt := range []string{
		`UPDATE ledger_events SET actor = 'someone else'`,
		`UPDATE ledger_events SET idx = idx + 1`,
		`UPDATE ledger_events SET idx = NULL`,
		`DELETE FROM ledger_events`,
		`TRUNCATE ledger_events CASCADE`,
		`UPDATE ledger_hashes SET hash = hash`,
		`DELETE FROM ledger_hashes`,
		`TRUNCATE ledger_hashes`,
		`UPDATE ledger_trees SET sealed_at = now()`,
		`DELETE FROM ledger_trees`,
		`UPDATE ledger_checkpoints SET note = note`,
		`DELETE FROM ledger_checkpoints`,
		`TRUNCATE ledger_checkpoints`,
	} {
		if _, err := conn.Exec(ctx, stmt); err == nil {
			t.Errorf("%s: accepted", stmt)
		}
	}
}

// TestLedgerConcurrentAppendsAndSealers writes events from many goroutines through
// two pools (two processes' worth of connections) while two sealers, one per pool,
// compete: the tree must come out with no gaps, no duplicates, every event proving
// into the final checkpoint, every checkpoint consistent with the next, and a root
// equal to a recomputation from the rows.
func TestLedgerConcurrentAppendsAndSealers(t *testing.T) {
	url := pgtest.NewDatabase(t)
	ctx := context.Background()
	open := func() *postgres.DB {
		db, err := postgres.Open(ctx, url, 6)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(db.Close)
		return db
	}
	pools := []*postgres.DB{open(), open()}
	user := mustCreateUser(t, pools[0], "ledger@example.org", accounts.RoleResearcher)
	project := mustCreateProject(t, pools[0], "LEDGER-1", user.ID)
	s := newLedgerSigner(t)

	const writers, each = 12, 25
	writersDone := make(chan struct{})
	errs := make(chan error, writers+2)
	sealersDone := make(chan struct{}, 2)
	for _, db := range pools {
		go func() {
			defer func() { sealersDone <- struct{}{} }()
			for {
				if _, err := db.SealLedger(ctx, s, time.Now()); err != nil {
					errs <- fmt.Errorf("sealer: %w", err)
					return
				}
				select {
				case <-writersDone:
					return
				case <-time.After(2 * time.Millisecond):
				}
			}
		}()
	}
	var wrote = make(chan struct{}, writers)
	for g := 0; g < writers; g++ {
		db := pools[g%2]
		go func() {
			defer func() { wrote <- struct{}{} }()
			for i := 0; i < each; i++ {
				code := fmt.Sprintf("W%02d-%03d", g, i)
				if _, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: project.ID, Code: code, CreatedBy: user.ID}, time.Now()); err != nil {
					errs <- fmt.Errorf("writer %d: %w", g, err)
					return
				}
			}
		}()
	}
	for g := 0; g < writers; g++ {
		<-wrote
	}
	close(writersDone)
	<-sealersDone
	<-sealersDone
	close(errs)
	for err := range errs {
		t.Fatal(err)
	}
	head, err := pools[1].SealLedger(ctx, s, time.Now())
	if err != nil {
		t.Fatal(err)
	}
	const total = writers * each
	if head.Size != total {
		t.Fatalf("sealed size %d, want %d", head.Size, total)
	}
	checkContiguous(t, pools[0], total)
	cps, err := pools[0].Checkpoints(ctx, 0, 1000)
	if err != nil || len(cps) < 2 {
		t.Fatalf("checkpoints = %d, %v; want several (one per seal that grew the tree)", len(cps), err)
	}
	t.Logf("%d events sealed in %d checkpoints by two competing sealers", total, len(cps))
	last := cps[len(cps)-1]
	if last.Size != total || last.Root != head.Root {
		t.Fatalf("last checkpoint %d %s, head %d %s", last.Size, last.Root, head.Size, head.Root)
	}
	for k, cp := range cps {
		if _, err := provenance.OpenCheckpoint([]byte(cp.Note), s.Verifier()); err != nil {
			t.Fatalf("checkpoint %d: %v", cp.Size, err)
		}
		if k == 0 {
			continue
		}
		p, err := pools[k%2].ConsistencyProof(ctx, cps[k-1].Size, cp.Size)
		if err != nil {
			t.Fatal(err)
		}
		if p.FromRoot != cps[k-1].Root || p.ToRoot != cp.Root || p.Check() != nil {
			t.Fatalf("checkpoint %d is not consistent with %d", cp.Size, cps[k-1].Size)
		}
	}
	for i := int64(0); i < total; i++ {
		ev, err := pools[i%2].LedgerEvent(ctx, i)
		if err != nil {
			t.Fatal(err)
		}
		p, err := pools[i%2].InclusionProof(ctx, i, total)
		if err != nil {
			t.Fatal(err)
		}
		if p.LeafHash != ev.LeafHash() || p.Root != head.Root || p.Check() != nil {
			t.Fatalf("inclusion proof of %d fails", i)
		}
	}
	rep, err := pools[0].AuditLedger(ctx, s.Verifier())
	if err != nil || rep.Fault != nil || rep.Root != head.Root || rep.Events != total {
		t.Fatalf("recomputation: %+v, %v; want root %s", rep, err, head.Root)
	}
}

// checkContiguous checks the sealed indexes are exactly 0…n-1, once each, and that no
// event is left unsealed.
func checkContiguous(t *testing.T, db *postgres.DB, n int64) {
	t.Helper()
	evs := map[int64]bool{}
	for i := int64(0); i < n; i++ {
		ev, err := db.LedgerEvent(context.Background(), i)
		if err != nil {
			t.Fatalf("index %d: %v (a gap)", i, err)
		}
		evs[ev.Seq] = true
	}
	if int64(len(evs)) != n {
		t.Fatalf("%d distinct events over %d indexes (one event twice)", len(evs), n)
	}
	if u, _, err := db.UnsealedEvents(context.Background()); err != nil || u != 0 {
		t.Fatalf("%d events left unsealed, %v", u, err)
	}
	if _, err := db.LedgerEvent(context.Background(), n); !errors.Is(err, beamledger.ErrNotFound) {
		t.Fatalf("index %d exists past the head: %v", n, err)
	}
}

// TestLedgerProofArguments checks the proofs refuse sizes outside the sealed tree.
func TestLedgerProofArguments(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	newAcqWorld(t, db, nil) // the instrument's and the specimen's events
	cp, err := db.SignCheckpoint(ctx, newLedgerSigner(t), t0)
	if err != nil {
		t.Fatal(err)
	}
	n := cp.Size
	for _, c := range [][2]int64{{-1, n}, {n, n}, {0, n + 1}} {
		if _, err := db.InclusionProof(ctx, c[0], c[1]); !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("InclusionProof(%d, %d) = %v, want invalid", c[0], c[1], err)
		}
	}
	for _, c := range [][2]int64{{0, n}, {n + 1, n}, {n, n + 1}} {
		if _, err := db.ConsistencyProof(ctx, c[0], c[1]); !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("ConsistencyProof(%d, %d) = %v, want invalid", c[0], c[1], err)
		}
	}
	if p, err := db.InclusionProof(ctx, 0, n); err != nil || p.Check() != nil {
		t.Errorf("InclusionProof(0, %d) = %v", n, err)
	}
}
