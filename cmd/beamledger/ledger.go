package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"golang.org/x/mod/sumdb/note"

	"beamledger/provenance"
	"beamledger/server"
)

const ledgerUsage = `usage: beamledger ledger <command> [flags]

commands:
  verify [-key VERIFIER-KEY] [-json]   recompute the tree from the database and check every
                                       stored hash and checkpoint (exit 3 on a finding)
  checkpoint                           seal committed events now and print the signed checkpoint
  key                                  print the checkpoints' verifier key, to publish

The database comes from BEAMLEDGER_DATABASE_URL; the signing key from
BEAMLEDGER_LEDGER_KEY (or _FILE) and the ledger's name from BEAMLEDGER_LEDGER_ORIGIN,
as for serve. verify needs only the public verifier key, given with -key.
`

// cmdLedger runs the ledger's administration commands.
func cmdLedger(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) == 0 {
		fmt.Fprint(stderr, ledgerUsage)
		return errors.New("ledger: no command given")
	}
	switch args[0] {
	case "verify":
		return cmdLedgerVerify(ctx, args[1:], stdout, stderr)
	case "checkpoint":
		return cmdLedgerCheckpoint(ctx, args[1:], stdout, stderr)
	case "key":
		return cmdLedgerKey(args[1:], stdout, stderr)
	case "help", "-h", "--help":
		fmt.Fprint(stdout, ledgerUsage)
		return nil
	}
	fmt.Fprint(stderr, ledgerUsage)
	return fmt.Errorf("ledger: unknown command %q", args[0])
}

// ledgerFlags registers the origin setting on fs and returns a function that, after
// fs.Parse, builds the checkpoint signer from the environment's secret key.
func ledgerFlags(fs *flag.FlagSet) func() (*provenance.CheckpointSigner, error) {
	cfg := server.Defaults()
	e := &envFlags{fs: fs}
	e.str(&cfg.LedgerOrigin, "ledger-origin", "BEAMLEDGER_LEDGER_ORIGIN", "the ledger's name in its checkpoints")
	return func() (*provenance.CheckpointSigner, error) {
		if err := errors.Join(append(e.errs, readSecrets(&cfg))...); err != nil {
			return nil, err
		}
		if len(cfg.LedgerKey) == 0 {
			return nil, errors.New("BEAMLEDGER_LEDGER_KEY (or BEAMLEDGER_LEDGER_KEY_FILE) is required")
		}
		return provenance.NewCheckpointSigner(cfg.LedgerOrigin, cfg.LedgerKey)
	}
}

// cmdLedgerVerify recomputes the ledger and checks it, streaming: its memory does not
// grow with the ledger. A finding exits with exitFindings, naming the first bad event.
func cmdLedgerVerify(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("ledger verify", flag.ContinueOnError)
	fs.SetOutput(stderr)
	keyText := fs.String("key", "", "verifier key (origin+hash+base64, as `beamledger ledger key` prints) or a file holding it; default: from BEAMLEDGER_LEDGER_KEY")
	asJSON := fs.Bool("json", false, "print the report as JSON")
	signer := ledgerFlags(fs)
	if err := fs.Parse(args); err != nil {
		return err
	}
	v, err := ledgerVerifier(*keyText, signer)
	if err != nil {
		return err
	}
	db, err := openDB(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	start := time.Now()
	rep, err := db.AuditLedger(ctx, v)
	if err != nil {
		return err
	}
	unsealed, _, err := db.UnsealedEvents(ctx)
	if err != nil {
		return err
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(struct {
			provenance.LedgerReport
			Unsealed int64 `json:"unsealed"`
		}{rep, unsealed}); err != nil {
			return err
		}
	} else {
		fmt.Fprintf(stdout, "checked %d sealed events, %d tree heads and %d checkpoints in %s; %d events not yet sealed\n",
			rep.Events, rep.Heads, rep.Checkpoints, time.Since(start).Round(time.Millisecond), unsealed)
		if rep.Fault == nil {
			fmt.Fprintf(stdout, "ledger intact: size %d, root %s\n", rep.Events, rep.Root)
		}
	}
	if f := rep.Fault; f != nil {
		if f.Index >= 0 {
			fmt.Fprintf(stdout, "first bad event: %d\n", f.Index)
		}
		return &exitError{exitFindings, f}
	}
	return nil
}

// ledgerVerifier reads the verifier key given with -key (the text or a file holding
// it), or derives it from the signing key in the environment.
func ledgerVerifier(text string, signer func() (*provenance.CheckpointSigner, error)) (note.Verifier, error) {
	if text == "" {
		s, err := signer()
		if err != nil {
			return nil, fmt.Errorf("%w (or give the public verifier key with -key)", err)
		}
		return s.Verifier(), nil
	}
	if !strings.Contains(text, "+") {
		b, err := os.ReadFile(text)
		if err != nil {
			return nil, fmt.Errorf("-key: %w", err)
		}
		text = string(b)
	}
	return provenance.ParseVerifierKey(text)
}

// cmdLedgerCheckpoint seals what is committed and prints the signed checkpoint.
func cmdLedgerCheckpoint(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("ledger checkpoint", flag.ContinueOnError)
	fs.SetOutput(stderr)
	signer := ledgerFlags(fs)
	if err := fs.Parse(args); err != nil {
		return err
	}
	s, err := signer()
	if err != nil {
		return err
	}
	db, err := openDB(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	cp, err := db.SignCheckpoint(ctx, s, time.Now())
	if err != nil {
		return err
	}
	_, err = io.WriteString(stdout, cp.Note)
	return err
}

// cmdLedgerKey prints the verifier key of the configured ledger key.
func cmdLedgerKey(args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("ledger key", flag.ContinueOnError)
	fs.SetOutput(stderr)
	signer := ledgerFlags(fs)
	if err := fs.Parse(args); err != nil {
		return err
	}
	s, err := signer()
	if err != nil {
		return err
	}
	_, err = fmt.Fprintln(stdout, s.VerifierKey())
	return err
}
