package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"

	"beamledger/provenance/bundle"
)

const verifyBundleUsage = `usage: beamledger verify-bundle BUNDLE.zip --key KEY

Checks a provenance bundle (GET /api/v1/trace/{sha256}/bundle) with no server and no
database: every member's SHA-256 against the manifest, the data file's bytes when the
bundle holds them, each ledger event's leaf hash and inclusion proof against the
checkpoint's root, the checkpoint's signature, and that the RO-Crate metadata, the
PROV-JSON document and the trace name the same file digest.

KEY is the facility's verifier key in the note format ("name+hash+base64", as
GET /api/v1/ledger/key answers it), or a file holding it (or holding that answer).
Exit status 0 when everything checks, 3 naming what failed, 2 for bad arguments.
`

// cmdVerifyBundle checks provenance bundles offline.
func cmdVerifyBundle(args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("verify-bundle", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() { fmt.Fprint(stderr, verifyBundleUsage) }
	keyArg := fs.String("key", "", "the checkpoints' verifier key, or a file holding it")
	// Flags may come before or after the bundle's name.
	var paths []string
	for {
		if err := fs.Parse(args); err != nil {
			return &exitError{exitBadInput, err}
		}
		if fs.NArg() == 0 {
			break
		}
		paths, args = append(paths, fs.Arg(0)), fs.Args()[1:]
	}
	switch {
	case len(paths) != 1:
		fs.Usage()
		return &exitError{exitBadInput, errors.New("verify-bundle: name one bundle")}
	case *keyArg == "":
		fs.Usage()
		return &exitError{exitBadInput, errors.New("verify-bundle: --key is required")}
	}
	key, err := bundle.ReadKey(*keyArg, os.ReadFile)
	if err != nil {
		return &exitError{exitBadInput, err}
	}
	f, err := os.Open(paths[0])
	if err != nil {
		return err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return err
	}
	s, err := bundle.Verify(f, st.Size(), key)
	if err != nil {
		fmt.Fprintf(stderr, "%s: NOT VERIFIED\n", paths[0])
		for _, line := range strings.Split(err.Error(), "\n") {
			fmt.Fprintln(stderr, "  - "+line)
		}
		return &exitError{exitFindings, fmt.Errorf("verify-bundle: %s failed %d check(s)", paths[0], strings.Count(err.Error(), "\n")+1)}
	}
	fmt.Fprintf(stdout, "%s: verified\n", paths[0])
	fmt.Fprintf(stdout, "  data file  %s (record %s), SHA-256 %s, %d bytes\n", s.FileName, s.FileID, s.SHA256, s.SizeBytes)
	if s.DataIncluded {
		fmt.Fprintln(stdout, "  bytes      included; their SHA-256 matches")
	} else {
		fmt.Fprintln(stdout, "  bytes      not included (the crate names where to fetch them)")
	}
	fmt.Fprintf(stdout, "  manifest   %d members, every digest matches\n", s.Members-1)
	fmt.Fprintf(stdout, "  ledger     %d ledger event(s) proved against the checkpoint of %s at size %d, signature checked\n", s.Events, s.Origin, s.TreeSize)
	fmt.Fprintln(stdout, "  names      RO-Crate, PROV-JSON, trace and ledger agree on the digest")
	return nil
}
