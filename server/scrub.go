package server

import (
	"context"
	"errors"
	"path"
	"time"

	"beamledger"
	"beamledger/provenance"
	"beamledger/storage/objects"
	"beamledger/storage/postgres"
)

// OpenObjects opens the object store a configuration names, for commands that work
// on stored bytes outside the server (scrub).
func OpenObjects(cfg Config) (objects.Store, error) { return openObjects(cfg) }

// ScrubOptions say what a scrub reads and how it reports.
type ScrubOptions struct {
	Selection postgres.ScrubSelection
	// Unrecorded also lists the store for objects under a content address that no
	// record names (left by a crash between storing and recording, or put there by
	// hand).
	Unrecorded bool
	// Progress, when set, is called about once a second and once at the end.
	Progress func(ScrubProgress)
	Now      func() time.Time
}

// ScrubProgress is how far a scrub has come.
type ScrubProgress struct {
	Checked, Total  int
	Bytes, AllBytes int64
	Findings        int
	Elapsed         time.Duration
	Done            bool
}

// scrubBuffer is the read size: large reads keep hashing near memory speed.
const scrubBuffer = 4 << 20

// Scrub re-reads stored objects, recomputes their SHA-256 and compares digest and
// size with the records, keeping each outcome; with Unrecorded it also reports
// objects that no record names. An object store that cannot be reached stops the
// scrub with an error rather than reporting every object missing.
func Scrub(ctx context.Context, db *postgres.DB, objs objects.Store, opts ScrubOptions) (provenance.ScrubReport, error) {
	now := opts.Now
	if now == nil {
		now = time.Now
	}
	rep := provenance.ScrubReport{StartedAt: now(), Findings: []provenance.ScrubFinding{}}
	total, allBytes, err := db.StoredObjectsTotal(ctx, opts.Selection)
	if err != nil {
		return rep, err
	}
	last := time.Time{}
	report := func(done bool) {
		if opts.Progress == nil || (!done && time.Since(last) < time.Second) {
			return
		}
		last = time.Now()
		opts.Progress(ScrubProgress{Checked: rep.Checked, Total: total, Bytes: rep.Bytes, AllBytes: allBytes,
			Findings: len(rep.Findings), Elapsed: now().Sub(rep.StartedAt), Done: done})
	}
	buf := make([]byte, scrubBuffer)
	err = db.StoredObjects(ctx, opts.Selection, func(o provenance.StoredObject) error {
		outcome, detail, n, err := checkStored(ctx, objs, o, buf)
		if err != nil {
			return err
		}
		rep.Checked++
		rep.Bytes += n
		if outcome != provenance.ScrubOK {
			rep.Findings = append(rep.Findings, provenance.ScrubFinding{Outcome: outcome, Key: o.Key, SHA256: o.SHA256, Detail: detail})
		}
		report(false)
		return db.RecordObjectCheck(ctx, o.SHA256, outcome, detail, now())
	})
	if err != nil {
		return rep, err
	}
	if opts.Unrecorded {
		if err := scrubUnrecorded(ctx, db, objs, &rep); err != nil {
			return rep, err
		}
	}
	rep.Elapsed = now().Sub(rep.StartedAt)
	report(true)
	return rep, nil
}

// checkStored reads one object back. A missing object is a finding; a store that
// cannot be reached is an error.
func checkStored(ctx context.Context, objs objects.Store, o provenance.StoredObject, buf []byte) (provenance.ScrubOutcome, string, int64, error) {
	r, err := objs.Open(ctx, o.Key, 0, -1)
	switch {
	case errors.Is(err, beamledger.ErrNotFound):
		return provenance.ScrubMissing, "no object under " + o.Key, 0, nil
	case err != nil:
		return "", "", 0, err
	}
	defer r.Close()
	n, outcome, detail := provenance.CheckObject(o, r, buf)
	if outcome == provenance.ScrubUnreadable && errors.Is(ctx.Err(), context.Canceled) {
		return "", "", n, ctx.Err()
	}
	return outcome, detail, n, nil
}

// scrubUnrecorded lists the content-addressed objects and reports those no record
// names, asking the database in batches.
func scrubUnrecorded(ctx context.Context, db *postgres.DB, objs objects.Store, rep *provenance.ScrubReport) error {
	var batch []objects.Info
	flush := func() error {
		digests := make([]string, len(batch))
		for i, info := range batch {
			digests[i] = path.Base(info.Key)
		}
		known, err := db.RecordedDigests(ctx, digests)
		if err != nil {
			return err
		}
		for i, info := range batch {
			d := digests[i]
			switch {
			case !provenance.ValidSHA256(d) || provenance.ObjectKey(d) != info.Key:
				rep.Findings = append(rep.Findings, provenance.ScrubFinding{Outcome: provenance.ScrubUnrecorded, Key: info.Key, Detail: "not a content address"})
			case !known[d]:
				rep.Findings = append(rep.Findings, provenance.ScrubFinding{Outcome: provenance.ScrubUnrecorded, Key: info.Key, SHA256: d,
					Detail: "no data-file record names these bytes"})
			}
		}
		batch = batch[:0]
		return nil
	}
	err := objs.List(ctx, "sha256/", func(info objects.Info) error {
		rep.Listed++
		batch = append(batch, info)
		if len(batch) == 1000 {
			return flush()
		}
		return nil
	})
	if err != nil {
		return err
	}
	return flush()
}
