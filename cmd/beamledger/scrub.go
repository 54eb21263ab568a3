package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"time"

	"beamledger/server"
	"beamledger/storage/postgres"
)

// exitFindings is scrub's status when it found a problem, apart from 1 for a scrub
// that could not run, so that a monitoring job can tell the two apart.
const exitFindings = 3

// cmdScrub re-reads stored objects, recomputes their SHA-256 and reports every
// object that is missing, changed or unrecorded; progress goes to stderr.
func cmdScrub(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("scrub", flag.ContinueOnError)
	fs.SetOutput(stderr)
	cfg := server.Defaults()
	e := &envFlags{fs: fs}
	objectFlags(e, &cfg)
	sample := fs.Int("sample", 0, "check this many objects chosen at random (0: all)")
	notFor := fs.Duration("not-checked-for", 0, "check only objects not checked for this long, e.g. 720h (0: all)")
	unrecorded := fs.Bool("unrecorded", true, "also list the store for objects no record names")
	asJSON := fs.Bool("json", false, "print the report as JSON instead of one line per finding")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: beamledger scrub [flags]   (database and object store from BEAMLEDGER_* as for serve)")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		return err
	}
	if err := errors.Join(append(e.errs, readSecrets(&cfg))...); err != nil {
		return err
	}
	if *sample < 0 || *notFor < 0 {
		return errors.New("-sample and -not-checked-for must not be negative")
	}
	db, err := openDB(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	objs, err := server.OpenObjects(cfg)
	if err != nil {
		return err
	}
	opts := server.ScrubOptions{Selection: postgres.ScrubSelection{Sample: *sample}, Unrecorded: *unrecorded,
		Progress: func(p server.ScrubProgress) { printScrubProgress(stderr, p) }}
	if *notFor > 0 {
		since := time.Now().Add(-*notFor)
		opts.Selection.NotCheckedSince = &since
	}
	rep, err := server.Scrub(ctx, db, objs, opts)
	if err != nil {
		return err
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rep); err != nil {
			return err
		}
	} else {
		for _, f := range rep.Findings {
			fmt.Fprintf(stdout, "%-15s  %s  %s\n", f.Outcome, f.Key, f.Detail)
		}
	}
	if n := len(rep.Findings); n > 0 {
		return &exitError{exitFindings, fmt.Errorf("scrub found %d problem(s) in %d objects checked", n, rep.Checked)}
	}
	return nil
}

// printScrubProgress writes one line of progress: objects and bytes checked of the
// total, the read rate, and the findings so far.
func printScrubProgress(w io.Writer, p server.ScrubProgress) {
	rate := 0.0
	if s := p.Elapsed.Seconds(); s > 0 {
		rate = float64(p.Bytes) / s / (1 << 20)
	}
	state := "scrub"
	if p.Done {
		state = "scrub done"
	}
	fmt.Fprintf(w, "%s: %d of %d objects, %s of %s, %.0f MiB/s, %d finding(s)\n", state, p.Checked, p.Total,
		byteSize(p.Bytes), byteSize(p.AllBytes), rate, p.Findings)
}

// byteSize writes a byte count in binary units.
func byteSize(n int64) string {
	const unit = 1024
	if n < unit {
		return fmt.Sprintf("%d B", n)
	}
	div, exp := int64(unit), 0
	for m := n / unit; m >= unit; m /= unit {
		div *= unit
		exp++
	}
	return fmt.Sprintf("%.1f %ciB", float64(n)/float64(div), "KMGTPE"[exp])
}
