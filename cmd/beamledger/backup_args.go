package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"

	"beamledger/server"
	"beamledger/storage/postgres"
)

// backupCommand is what backup and restore read from their command line and
// environment alike: the object store's settings, -pg-bin, exactly one folder, the
// secrets, and the PostgreSQL program the command runs.
type backupCommand struct {
	cfg server.Config
	// dir is the one folder argument.
	dir string
	// tool is the path of the PostgreSQL program (pg_dump or pg_restore).
	tool string
}

// backupCommandSpec describes one of the commands.
type backupCommandSpec struct {
	name  string // the command's name, "backup" or "restore"
	usage string // printed before the flags' defaults
	// folder names the one argument in the error for a wrong count ("folder").
	folder string
	// tool is the PostgreSQL program to find, "pg_dump" or "pg_restore".
	tool string
	// flags registers the command's own flags beside the shared ones.
	flags func(fs *flag.FlagSet, e *envFlags, cfg *server.Config)
}

// parseBackupCommand parses args for spec: the flags, then one folder, then the
// secrets from the environment, then the PostgreSQL program. Nothing is opened yet.
func parseBackupCommand(spec backupCommandSpec, args []string, stderr io.Writer) (backupCommand, error) {
	fs := flag.NewFlagSet(spec.name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	c := backupCommand{cfg: server.Defaults()}
	e := &envFlags{fs: fs}
	objectFlags(e, &c.cfg)
	if spec.flags != nil {
		spec.flags(fs, e, &c.cfg)
	}
	pgBin := pgBinFlag(e)
	fs.Usage = func() { fmt.Fprint(stderr, spec.usage); fs.PrintDefaults() }
	if err := fs.Parse(args); err != nil {
		return c, err
	}
	if fs.NArg() != 1 {
		fs.Usage()
		return c, fmt.Errorf("%s: give one %s", spec.name, spec.folder)
	}
	c.dir = fs.Arg(0)
	if err := errors.Join(append(e.errs, readSecrets(&c.cfg))...); err != nil {
		return c, err
	}
	var err error
	c.tool, err = pgTool(*pgBin, spec.tool)
	return c, err
}

// openBackupDatabase opens the database both commands work on, with the two
// connections they need, and returns its URL for the PostgreSQL program too.
func openBackupDatabase(ctx context.Context) (*postgres.DB, string, error) {
	dbURL, err := databaseURL()
	if err != nil {
		return nil, "", err
	}
	db, err := postgres.Open(ctx, dbURL, 2)
	if err != nil {
		return nil, "", err
	}
	return db, dbURL, nil
}
