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
  verify [-key VERIFIER-KEY]... [-json]
                                       recompute the tree from the database and check every
                                       stored hash and checkpoint (exit 3 on a finding)
  checkpoint                           seal committed events now and print the signed checkpoint
  key                                  print the checkpoints' verifier key, to publish

The database comes from BEAMLEDGER_DATABASE_URL; the signing key from
BEAMLEDGER_LEDGER_KEY (or _FILE) and the ledger's name from BEAMLEDGER_LEDGER_ORIGIN,
as for serve. verify needs only the public verifier keys, given with -key: after a
rotation of the ledger key give every key that signed checkpoints (-key repeated, a
comma-separated list, or a file with one key a line); each checkpoint is checked
with the key its signature names, and one signed by none of them is a finding.
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
	var keyTexts keyList
	fs.Var(&keyTexts, "key", "verifier key (origin+hash+base64, as `beamledger ledger key` prints), a comma-separated list of them or a file holding them one a line; repeat for several (the keys of a rotated ledger); default: from BEAMLEDGER_LEDGER_KEY")
	asJSON := fs.Bool("json", false, "print the report as JSON")
	signer := ledgerFlags(fs)
	if err := fs.Parse(args); err != nil {
		return err
	}
	keys, err := ledgerVerifiers(keyTexts, signer)
	if err != nil {
		return err
	}
	db, err := openDB(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	start := time.Now()
	rep, err := db.AuditLedger(ctx, keys...)
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
		} else {
			fmt.Fprintf(stdout, "first bad checkpoint: size %d: %s\n", f.Size, f.Problem)
		}
		return &exitError{exitFindings, f}
	}
	return nil
}

// keyList collects the -key values in order.
type keyList []string

func (k *keyList) String() string { return strings.Join(*k, ",") }

func (k *keyList) Set(v string) error {
	*k = append(*k, v)
	return nil
}

// ledgerVerifiers reads the verifier keys given with -key, each value a key, a
// comma-separated list of keys or a file holding keys one a line (blank lines and
// lines starting with # skipped), or, with none given, derives the one key from the
// signing key in the environment. A key given twice counts once.
func ledgerVerifiers(texts []string, signer func() (*provenance.CheckpointSigner, error)) ([]note.Verifier, error) {
	if len(texts) == 0 {
		s, err := signer()
		if err != nil {
			return nil, fmt.Errorf("%w (or give the public verifier key with -key)", err)
		}
		return []note.Verifier{s.Verifier()}, nil
	}
	var keys []note.Verifier
	seen := map[string]bool{}
	add := func(where, text string) error {
		v, err := provenance.ParseVerifierKey(text)
		if err != nil {
			return fmt.Errorf("-key %s: %w", where, err)
		}
		id := fmt.Sprintf("%s+%08x", v.Name(), v.KeyHash())
		if !seen[id] {
			seen[id] = true
			keys = append(keys, v)
		}
		return nil
	}
	for _, text := range texts {
		for part := range strings.SplitSeq(text, ",") {
			part = strings.TrimSpace(part)
			switch {
			case part == "":
				continue
			case strings.Contains(part, "+"):
				if err := add(fmt.Sprintf("%q", part), part); err != nil {
					return nil, err
				}
				continue
			}
			b, err := os.ReadFile(part)
			if err != nil {
				return nil, fmt.Errorf("-key: %w", err)
			}
			for n, line := range strings.Split(string(b), "\n") {
				line = strings.TrimSpace(line)
				if line == "" || strings.HasPrefix(line, "#") {
					continue
				}
				if err := add(fmt.Sprintf("%s line %d", part, n+1), line); err != nil {
					return nil, err
				}
			}
		}
	}
	if len(keys) == 0 {
		return nil, errors.New("-key: no verifier key given")
	}
	return keys, nil
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
