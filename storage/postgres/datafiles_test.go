package postgres_test

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"sync"
	"testing"

	"beamledger"
	"beamledger/provenance"
)

func digestOf(s string) string {
	sum := sha256.Sum256([]byte(s))
	return hex.EncodeToString(sum[:])
}

func (w acqWorld) file(t *testing.T, acquisitionID, content string) provenance.DataFile {
	t.Helper()
	f, _, err := w.db.RecordFile(context.Background(), provenance.NewDataFile{ProjectID: w.project.ID, AcquisitionID: acquisitionID,
		SHA256: digestOf(content), SizeBytes: int64(len(content)), MediaType: "application/octet-stream", FileName: content + ".bin",
		Store: "file:///test", UploadedBy: w.user.ID}, t0)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func TestRecordFile(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	a, _ := w.create(t, 1)
	n := provenance.NewDataFile{ProjectID: w.project.ID, AcquisitionID: a.ID, SHA256: digestOf("abc"), SizeBytes: 3,
		MediaType: "text/plain", FileName: "abc.txt", Store: "file:///test", UploadedBy: w.user.ID}
	f, created, err := db.RecordFile(ctx, n, t0)
	if err != nil || !created || f.Status != provenance.FileStored || f.ObjectKey != provenance.ObjectKey(digestOf("abc")) || f.StoredAt == nil {
		t.Fatalf("first record: %+v %v %v", f, created, err)
	}
	// [published: FIPS 180-4 examples] SHA-256("abc"), stored and read back as hex.
	if f.SHA256 != "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad" {
		t.Errorf("sha256 = %s", f.SHA256)
	}
	again, created, err := db.RecordFile(ctx, n, t0)
	if err != nil || created || again.ID != f.ID {
		t.Errorf("same bytes, same acquisition: %+v created=%v %v; want the first record", again, created, err)
	}
	n.AcquisitionID = ""
	proc, created, err := db.RecordFile(ctx, n, t0)
	if err != nil || !created || proc.ID == f.ID || proc.AcquisitionID != nil || proc.ObjectKey != f.ObjectKey {
		t.Errorf("same bytes as a processed file: %+v created=%v %v; want a second record of the same object", proc, created, err)
	}
	if ok, err := db.ObjectStored(ctx, digestOf("abc")); err != nil || !ok {
		t.Errorf("ObjectStored(abc) = %v %v", ok, err)
	}
	if ok, _ := db.ObjectStored(ctx, digestOf("abd")); ok {
		t.Error("ObjectStored(abd) = true")
	}
	n.AcquisitionID = "00000000-0000-4000-8000-000000000000"
	_, _, err = db.RecordFile(ctx, n, t0)
	if domainError(t, err).Fields["acquisition_id"] == "" {
		t.Errorf("unknown acquisition: %v", err)
	}
	// A stored record is final, whatever SQL tries.
	for _, stmt := range []string{`UPDATE data_files SET file_name = 'renamed'`, `UPDATE data_files SET size_bytes = 4`, `DELETE FROM data_files`, `TRUNCATE data_files CASCADE`} {
		if _, err := conn.Exec(ctx, stmt); err == nil {
			t.Errorf("%s: accepted", stmt)
		}
	}
	// The database refuses a stored record without its digest.
	_, err = conn.Exec(ctx, `INSERT INTO data_files (project_id, media_type, file_name, store, status, uploaded_by, created_at, stored_at, object_key, size_bytes)
		VALUES ($1, 'x/y', 'n', 's', 'stored', 'u', now(), now(), 'k', 1)`, w.project.ID)
	if err == nil {
		t.Error("a stored record without a digest was accepted")
	}
}

func TestDerivationCycles(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	a, _ := w.create(t, 1)
	f := map[string]provenance.DataFile{}
	for _, name := range []string{"A", "B", "C", "D", "E"} {
		f[name] = w.file(t, a.ID, name)
	}
	derive := func(out string, ins ...string) error {
		ids := []string{}
		for _, in := range ins {
			ids = append(ids, f[in].ID)
		}
		_, err := db.RecordDerivation(ctx, provenance.NewDerivation{OutputFileID: f[out].ID, InputFileIDs: ids, Software: "s", SoftwareVersion: "1",
			Parameters: json.RawMessage(`{"k":1}`), OperatorID: w.user.ID, PerformedAt: t0, RecordedBy: w.user.ID}, t0)
		return err
	}
	if err := derive("B", "A"); err != nil {
		t.Fatal(err)
	}
	if err := derive("C", "B", "A"); err != nil {
		t.Fatal(err)
	}
	var e *beamledger.Error
	if err := derive("A", "C"); !errors.As(err, &e) || e.Rule != "lineage_cycle" {
		t.Errorf("A from C (C ← B ← A): %v, want lineage_cycle", err)
	}
	if err := derive("C", "D"); !errors.Is(err, beamledger.ErrConflict) {
		t.Errorf("a second producer of C: %v, want a conflict", err)
	}
	l, err := db.Lineage(ctx, f["B"].ID)
	if err != nil || len(l.Derivations) != 2 || len(l.Files) != 3 {
		t.Errorf("lineage of B: %d derivations, %d files, %v; want both steps and A, B, C", len(l.Derivations), len(l.Files), err)
	}
	if got := l.Ancestors(f["C"].ID); len(got) != 2 {
		t.Errorf("ancestors of C = %v", got)
	}
	// Two steps recorded at once that would together close a cycle (D ← E and E ← D):
	// exactly one is accepted.
	var wg sync.WaitGroup
	errs := make([]error, 2)
	for i, pair := range [][2]string{{"D", "E"}, {"E", "D"}} {
		wg.Add(1)
		go func() { defer wg.Done(); errs[i] = derive(pair[0], pair[1]) }()
	}
	wg.Wait()
	if (errs[0] == nil) == (errs[1] == nil) {
		t.Errorf("concurrent D←E and E←D: %v / %v; want exactly one accepted", errs[0], errs[1])
	}
}
