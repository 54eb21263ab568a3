package postgres_test

import (
	"context"
	"testing"
	"time"

	"github.com/google/uuid"

	"beamledger"
	"beamledger/provenance"
)

// TestUploadLifecycle: one lease at a time, progress only under the lease, a
// finish that stores the record, and a finish that yields to the record the same
// bytes already have.
func TestUploadLifecycle(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	a, _ := w.create(t, 1)
	newUpload := func(name string) provenance.Upload {
		t.Helper()
		u, err := db.CreateUpload(ctx, uuid.NewString(), provenance.NewUpload{File: provenance.NewDataFile{ProjectID: w.project.ID,
			AcquisitionID: a.ID, MediaType: "text/plain", FileName: name, Store: "file:///test", UploadedBy: w.user.ID},
			ObjectKey: "incoming/x", MultipartID: "m1", LengthBytes: 3, PartSizeBytes: 8 << 20, HashState: []byte{1}}, t0)
		if err != nil {
			t.Fatal(err)
		}
		return u
	}
	u := newUpload("abc.txt")
	f, err := db.DataFile(ctx, u.DataFileID)
	if err != nil || f.Status != provenance.FilePending || f.ProjectID != w.project.ID || u.ProjectID != w.project.ID {
		t.Fatalf("pending file %+v %v; upload %+v", f, err, u)
	}

	if _, err := db.LeaseUpload(ctx, u.ID, uuid.NewString(), time.Minute, t0); err != nil {
		t.Fatal(err)
	}
	second := uuid.NewString()
	_, err = db.LeaseUpload(ctx, u.ID, second, time.Minute, t0)
	wantKind(t, err, beamledger.ErrConflict)
	p := provenance.UploadProgress{OffsetBytes: 3, Parts: []provenance.UploadPart{{Number: 1, ETag: "e", SizeBytes: 3}}, HashState: []byte{2}}
	wantKind(t, db.SaveUploadProgress(ctx, u.ID, second, p, time.Minute, t0), beamledger.ErrConflict)
	_, err = db.LeaseUpload(ctx, uuid.NewString(), second, time.Minute, t0)
	wantKind(t, err, beamledger.ErrNotFound)

	// An expired lease passes to the next request; the old holder's writes are refused.
	third := uuid.NewString()
	if err := db.ReleaseUpload(ctx, u.ID, "00000000-0000-0000-0000-000000000000"); err != nil {
		t.Fatal(err)
	}
	short := newUpload("short.txt")
	if _, err := db.LeaseUpload(ctx, short.ID, second, time.Millisecond, t0); err != nil {
		t.Fatal(err)
	}
	time.Sleep(10 * time.Millisecond)
	if _, err := db.LeaseUpload(ctx, short.ID, third, time.Minute, t0); err != nil {
		t.Fatalf("taking an expired lease: %v", err)
	}
	wantKind(t, db.RenewUpload(ctx, short.ID, second, time.Minute, t0), beamledger.ErrConflict)
	if err := db.SaveUploadProgress(ctx, short.ID, third, p, time.Minute, t0.Add(time.Minute)); err != nil {
		t.Fatal(err)
	}
	got, err := db.Upload(ctx, short.ID)
	if err != nil || got.OffsetBytes != 3 || len(got.Parts) != 1 || got.Parts[0].ETag != "e" || got.HashState[0] != 2 || !got.LastActivity.Equal(t0.Add(time.Minute)) {
		t.Fatalf("after progress: %+v %v", got, err)
	}

	n := provenance.NewDataFile{SHA256: digestOf("abc"), SizeBytes: 3, MediaType: "text/plain"}
	stored, created, err := db.FinishUpload(ctx, short.ID, n, t0)
	if err != nil || !created || stored.ID != short.DataFileID || stored.Status != provenance.FileStored || stored.SHA256 != digestOf("abc") {
		t.Fatalf("finish: %+v %v %v", stored, created, err)
	}
	_, err = db.Upload(ctx, short.ID)
	wantKind(t, err, beamledger.ErrNotFound)
	oneEvent(t, db, provenance.EntityDataFile, stored.ID, provenance.ActionCreate)
	// The same bytes for the same acquisition: the first record stands, the pending one goes.
	again, created, err := db.FinishUpload(ctx, u.ID, n, t0)
	if err != nil || created || again.ID != stored.ID {
		t.Fatalf("second finish: %+v %v %v", again, created, err)
	}
	_, err = db.DataFile(ctx, u.DataFileID)
	wantKind(t, err, beamledger.ErrNotFound)
	if evs, err := db.EventsFor(ctx, provenance.EntityDataFile, u.DataFileID); err != nil || len(evs) != 0 {
		t.Errorf("ledger events for the record that gave way: %v %v", evs, err)
	}
}

// TestClaimExpiredUploads: only uploads idle past the cut-off and not leased are
// claimed, with their pending records.
func TestClaimExpiredUploads(t *testing.T) {
	db, _ := openRaw(t)
	ctx := context.Background()
	w := newAcqWorld(t, db, nil)
	a, _ := w.create(t, 1)
	mk := func(at time.Time) provenance.Upload {
		u, err := db.CreateUpload(ctx, uuid.NewString(), provenance.NewUpload{File: provenance.NewDataFile{ProjectID: w.project.ID,
			AcquisitionID: a.ID, MediaType: "text/plain", FileName: "f.bin", Store: "file:///test", UploadedBy: w.user.ID},
			ObjectKey: "incoming/x", MultipartID: "m-" + at.String(), LengthBytes: 3, PartSizeBytes: 8 << 20, HashState: []byte{1}}, at)
		if err != nil {
			t.Fatal(err)
		}
		return u
	}
	old, leased, fresh := mk(t0), mk(t0), mk(t0.Add(48*time.Hour))
	if _, err := db.LeaseUpload(ctx, leased.ID, uuid.NewString(), time.Minute, t0); err != nil {
		t.Fatal(err)
	}
	ids, err := db.UploadMultipartIDs(ctx)
	if err != nil || len(ids) != 2 { // old and leased share a multipart id here
		t.Fatalf("multipart ids %v %v", ids, err)
	}
	claimed, err := db.ClaimExpiredUploads(ctx, t0.Add(24*time.Hour), 10)
	if err != nil || len(claimed) != 1 || claimed[0].ID != old.ID {
		t.Fatalf("claimed %+v %v", claimed, err)
	}
	_, err = db.DataFile(ctx, old.DataFileID)
	wantKind(t, err, beamledger.ErrNotFound)
	live, err := db.UploadIDs(ctx, []string{old.ID, leased.ID, fresh.ID, "not-a-uuid"})
	if err != nil || live[old.ID] || !live[leased.ID] || !live[fresh.ID] {
		t.Errorf("live uploads %v %v", live, err)
	}
}
