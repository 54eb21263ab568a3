package server

import (
	"bytes"
	"context"
	"net/http"
	"strings"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/objects"
	"beamledger/storage/objects/objectstest"
	"beamledger/storage/postgres"
)

// TestScrub stores three files, then changes one byte of the first object, removes
// the second and plants an object no record names: the scrub reports exactly those,
// against both kinds of store.
func TestScrub(t *testing.T) {
	for name, open := range map[string]func(t *testing.T) objects.Store{
		"disk": func(t *testing.T) objects.Store {
			d, err := objects.NewDisk(t.TempDir())
			if err != nil {
				t.Fatal(err)
			}
			return d
		},
		"s3": func(t *testing.T) objects.Store { return objectstest.NewS3(t) },
	} {
		t.Run(name, func(t *testing.T) {
			w := newWorld(t)
			w.srv.objects = open(t)
			researcher := w.tokens[accounts.RoleResearcher]
			acq := testAcquisition(w)
			var files []provenance.DataFile
			for _, body := range []string{"first frame", "second frame", "third frame"} {
				var f provenance.DataFile
				if r := w.upload("/api/v1/files?acquisition_id="+acq+"&name=f.raw", researcher, []byte(body), nil, &f); r.StatusCode != http.StatusCreated {
					t.Fatalf("upload: %d %s", r.StatusCode, r.Body)
				}
				files = append(files, f)
			}
			ctx := context.Background()
			opts := ScrubOptions{Unrecorded: true, Now: w.clock.Now}
			clean, err := Scrub(ctx, w.db, w.srv.objects, opts)
			if err != nil || clean.Checked != 3 || clean.Listed != 3 || len(clean.Findings) != 0 || clean.Bytes != int64(len("first frame")+len("second frame")+len("third frame")) {
				t.Fatalf("clean scrub: %+v %v", clean, err)
			}

			// One byte changed (F→f), one object gone, one object nobody recorded.
			if _, err := w.srv.objects.Put(ctx, files[0].ObjectKey, strings.NewReader("first Frame"), -1, objects.PutOptions{}); err != nil {
				t.Fatal(err)
			}
			if err := w.srv.objects.Delete(ctx, files[1].ObjectKey); err != nil {
				t.Fatal(err)
			}
			stray := provenance.ObjectKey(strings.Repeat("ab", 32))
			if _, err := w.srv.objects.Put(ctx, stray, bytes.NewReader([]byte("stray")), 5, objects.PutOptions{}); err != nil {
				t.Fatal(err)
			}
			var progress []ScrubProgress
			opts.Progress = func(p ScrubProgress) { progress = append(progress, p) }
			rep, err := Scrub(ctx, w.db, w.srv.objects, opts)
			if err != nil {
				t.Fatal(err)
			}
			got := map[provenance.ScrubOutcome]string{}
			for _, f := range rep.Findings {
				got[f.Outcome] = f.Key
			}
			want := map[provenance.ScrubOutcome]string{provenance.ScrubDigestMismatch: files[0].ObjectKey,
				provenance.ScrubMissing: files[1].ObjectKey, provenance.ScrubUnrecorded: stray}
			if len(rep.Findings) != 3 || got[provenance.ScrubDigestMismatch] != want[provenance.ScrubDigestMismatch] ||
				got[provenance.ScrubMissing] != want[provenance.ScrubMissing] || got[provenance.ScrubUnrecorded] != want[provenance.ScrubUnrecorded] {
				t.Errorf("findings = %+v, want %v", rep.Findings, want)
			}
			if n := len(progress); n == 0 || !progress[n-1].Done || progress[n-1].Total != 3 || progress[n-1].Checked != 3 || progress[n-1].Findings != 3 {
				t.Errorf("progress = %+v", progress)
			}

			// Checked just now: a scrub of objects not checked for an hour reads none.
			since := w.clock.Now().Add(-time.Hour)
			recent, err := Scrub(ctx, w.db, w.srv.objects, ScrubOptions{Now: w.clock.Now, Selection: scrubSince(since)})
			if err != nil || recent.Checked != 0 {
				t.Errorf("scrub of objects unchecked for an hour: %+v %v", recent, err)
			}
			w.clock.Advance(2 * time.Hour)
			later, err := Scrub(ctx, w.db, w.srv.objects, ScrubOptions{Now: w.clock.Now, Selection: scrubSince(w.clock.Now().Add(-time.Hour))})
			if err != nil || later.Checked != 3 {
				t.Errorf("two hours on: %+v %v", later, err)
			}
		})
	}
}

func scrubSince(t time.Time) postgres.ScrubSelection {
	return postgres.ScrubSelection{NotCheckedSince: &t}
}
