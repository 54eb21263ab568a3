package server

import (
	"context"
	"io"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/objects"
	"beamledger/storage/objects/objectstest"
)

// TestCheckpointsPublishedToObjectStore: with a checkpoint retention configured,
// each seal that grows the tree puts its signed checkpoint in the object store
// under compliance-mode retention, once, and the copy verifies with the ledger's
// key; a second process's seal of the same tree adds nothing.
func TestCheckpointsPublishedToObjectStore(t *testing.T) {
	w := newWorld(t)
	ctx := context.Background()
	cfg := objectstest.Config(t)
	cfg.ObjectLock = true
	store := objectstest.Open(t, cfg)
	if !store.ObjectLocking() {
		t.Fatal("the test bucket does not lock objects")
	}
	w.srv.objects = store
	w.srv.cfg.LedgerCheckpointRetention = time.Hour

	researcher := w.tokens[accounts.RoleResearcher]
	for i, code := range []string{"PUB-1", "PUB-2"} {
		w.expect(201, "POST", "/api/v1/specimens", researcher, map[string]string{"project_id": w.own.ID, "code": code}, nil)
		head, err := w.srv.sealLedger(ctx)
		if err != nil {
			t.Fatal(err)
		}
		r, err := store.Open(ctx, checkpointKey(head.Size), 0, -1)
		if err != nil {
			t.Fatalf("seal %d: checkpoint of size %d not published: %v", i, head.Size, err)
		}
		note, _ := io.ReadAll(r)
		r.Close()
		cp, err := provenance.OpenCheckpoint(note, w.srv.ledger.Verifier())
		if err != nil || cp.Size != head.Size || cp.Root != head.Root {
			t.Fatalf("published checkpoint %q: %+v %v; want size %d root %v", note, cp, err, head.Size, head.Root)
		}
	}
	// Another process seals the same tree: it finds the copy and puts nothing.
	other, err := New(w.srv.cfg, w.db, w.srv.log, w.clock.Now)
	if err != nil {
		t.Fatal(err)
	}
	other.objects = store
	if _, err := other.sealLedger(ctx); err != nil {
		t.Fatal(err)
	}
	var keys []string
	if err := store.List(ctx, "ledger/checkpoints/", func(i objects.Info) error { keys = append(keys, i.Key); return nil }); err != nil {
		t.Fatal(err)
	}
	if len(keys) != 2 {
		t.Errorf("published checkpoints %v, want one per signed tree", keys)
	}
	// Compliance mode: the store's own delete (which may bypass governance) fails.
	if err := store.Delete(ctx, keys[0]); err == nil {
		if _, serr := store.Stat(ctx, keys[0]); serr != nil {
			t.Errorf("a published checkpoint was deleted: %v", serr)
		}
	}
}
