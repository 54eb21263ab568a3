package main

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"net/url"
	"os"
	"path/filepath"

	"beamledger/provenance"
	"beamledger/server"
	"beamledger/storage/objects"
	"beamledger/storage/postgres"
)

const restoreUsage = `usage: beamledger restore [-pg-bin DIR] DIR

Restores the backup in DIR into an empty database and, when the backup holds the
objects, an empty object store, both named by BEAMLEDGER_* as for serve. Every
object and the dump are checked against the manifest before anything is written; a
backup that does not match its manifest is refused (exit 3). A target that already
holds tables or objects is refused. A backup made with -with-objects=false restores
the database only, into a store that must already hold every listed object (checked
first).
`

// cmdRestore restores a backup folder.
func cmdRestore(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	c, err := parseBackupCommand(backupCommandSpec{name: "restore", usage: restoreUsage, folder: "backup folder", tool: "pg_restore",
		flags: func(_ *flag.FlagSet, e *envFlags, cfg *server.Config) {
			e.boolean(&cfg.S3.CreateBucket, "s3-create-bucket", "BEAMLEDGER_S3_CREATE_BUCKET", "create the S3 bucket when missing")
		}}, args, stderr)
	if err != nil {
		return err
	}
	cfg, dir := c.cfg, c.dir
	m, err := checkBackup(dir)
	if err != nil {
		return &exitError{exitFindings, err}
	}
	db, dbURL, err := openBackupDatabase(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	if err := db.CheckEmpty(ctx); err != nil {
		return fmt.Errorf("refusing to restore: %w", err)
	}
	store, err := server.OpenObjects(cfg)
	if err != nil {
		return err
	}
	if m.ObjectsCopied {
		if err := checkStoreEmpty(ctx, store); err != nil {
			return err
		}
	} else if err := checkStoreHolds(ctx, store, m); err != nil {
		return &exitError{exitFindings, err}
	}
	name, env := pgConnection(dbURL)
	if err := runPGTool(ctx, env, c.tool, "--single-transaction", "--exit-on-error", "--no-owner", "--no-acl",
		"--dbname="+name, filepath.Join(dir, dumpFile)); err != nil {
		return fmt.Errorf("pg_restore: %w", err)
	}
	if err := matchRestored(ctx, db, m); err != nil {
		// The dump's records and the manifest disagree: take the records out again,
		// so that the target is as empty as it was found.
		if derr := db.DropRestored(context.WithoutCancel(ctx)); derr != nil {
			err = errors.Join(err, fmt.Errorf("and removing the restored tables failed: %w", derr))
		}
		return &exitError{exitFindings, err}
	}
	if m.ObjectsCopied {
		for _, o := range m.Objects {
			if err := copyObjectIn(ctx, store, o, filepath.Join(dir, objectsDir)); err != nil {
				return fmt.Errorf("restoring objects (the database is restored; empty the store and the database before trying again): %w", err)
			}
		}
	}
	fmt.Fprintf(stdout, "restored %s: schema version %d, %d objects (%s)%s\n", dir, m.SchemaVersion, m.ObjectCount,
		byteSize(m.ObjectBytes), map[bool]string{true: " copied into " + store.Name(), false: " found in " + store.Name()}[m.ObjectsCopied])
	return nil
}

// checkBackup reads the manifest and checks the backup against it without writing
// anything: the dump's digest and size, and every copied object's digest, size and
// address, with no object file the manifest does not list.
func checkBackup(dir string) (manifest, error) {
	var m manifest
	b, err := os.ReadFile(filepath.Join(dir, manifestFile))
	if err != nil {
		return m, err
	}
	if err := json.Unmarshal(b, &m); err != nil {
		return m, fmt.Errorf("%s: %w", manifestFile, err)
	}
	if m.Format != backupFormat {
		return m, fmt.Errorf("%s: format %q, want %q", manifestFile, m.Format, backupFormat)
	}
	dump, err := digestFile(filepath.Join(dir, dumpFile))
	if err != nil {
		return m, err
	}
	if m.Database.File != dumpFile || dump.SHA256 != m.Database.SHA256 || dump.SizeBytes != m.Database.SizeBytes {
		return m, fmt.Errorf("the database dump has SHA-256 %s and %d bytes, the manifest says %s and %d", dump.SHA256, dump.SizeBytes, m.Database.SHA256, m.Database.SizeBytes)
	}
	var total int64
	listed := map[string]bool{}
	for _, o := range m.Objects {
		path, err := objectPath(filepath.Join(dir, objectsDir), o)
		if err != nil {
			return m, err
		}
		total += o.SizeBytes
		listed[path] = true
		if !m.ObjectsCopied {
			continue
		}
		got, err := digestFile(path)
		if err != nil {
			return m, fmt.Errorf("object %s: %w", o.Key, err)
		}
		if got.SHA256 != o.SHA256 || got.SizeBytes != o.SizeBytes {
			return m, fmt.Errorf("object %s has SHA-256 %s and %d bytes in the backup, the manifest says %s and %d", o.Key, got.SHA256, got.SizeBytes, o.SHA256, o.SizeBytes)
		}
	}
	if len(listed) != len(m.Objects) || m.ObjectCount != len(m.Objects) || m.ObjectBytes != total {
		return m, fmt.Errorf("the manifest lists %d objects (%d distinct) of %d bytes but says %d objects of %d bytes", len(m.Objects), len(listed), total, m.ObjectCount, m.ObjectBytes)
	}
	root := filepath.Join(dir, objectsDir)
	err = filepath.WalkDir(root, func(path string, d fs.DirEntry, err error) error {
		if errors.Is(err, fs.ErrNotExist) && path == root {
			return nil // no objects, or none copied
		}
		if err != nil || d.IsDir() {
			return err
		}
		if !listed[path] {
			return fmt.Errorf("the backup holds %s, which the manifest does not list", path)
		}
		return nil
	})
	return m, err
}

// matchRestored checks that the restored records point to exactly the objects the
// manifest lists, with the same sizes.
func matchRestored(ctx context.Context, db *postgres.DB, m manifest) error {
	want := make(map[string]int64, len(m.Objects))
	for _, o := range m.Objects {
		want[o.Key] = o.SizeBytes
	}
	seen := 0
	err := db.AllStoredObjects(ctx, func(o provenance.StoredObject) error {
		size, ok := want[o.Key]
		if !ok || size != o.SizeBytes {
			return fmt.Errorf("the restored records name object %s of %d bytes, which the manifest does not list so", o.Key, o.SizeBytes)
		}
		seen++
		return nil
	})
	if err == nil && seen != len(want) {
		err = fmt.Errorf("the manifest lists %d objects but the restored records name %d", len(want), seen)
	}
	return err
}

// checkStoreEmpty refuses a store that holds any object.
func checkStoreEmpty(ctx context.Context, store objects.Store) error {
	errFound := errors.New("found")
	var first string
	err := store.List(ctx, "", func(i objects.Info) error { first = i.Key; return errFound })
	switch {
	case errors.Is(err, errFound):
		return fmt.Errorf("refusing to restore: the object store %s is not empty (it holds %s)", store.Name(), first)
	case err != nil:
		return err
	}
	return nil
}

// copyObjectIn stores one object from the backup, checking its digest again as it
// is read (the backup was checked, but may sit on a disk that changes).
func copyObjectIn(ctx context.Context, store objects.Store, o manifestObject, root string) error {
	path, err := objectPath(root, o)
	if err != nil {
		return err
	}
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	h := sha256.New()
	if _, err := store.Put(ctx, o.Key, io.TeeReader(f, h), o.SizeBytes, objects.PutOptions{}); err != nil {
		return fmt.Errorf("object %s: %w", o.Key, err)
	}
	if got := hex.EncodeToString(h.Sum(nil)); got != o.SHA256 {
		_ = store.Delete(ctx, o.Key)
		return fmt.Errorf("object %s changed in the backup while it was restored (SHA-256 %s)", o.Key, got)
	}
	return nil
}

// checkStoreHolds checks that the store holds every listed object at its size, for
// a backup that did not copy them; it runs before anything is restored.
func checkStoreHolds(ctx context.Context, store objects.Store, m manifest) error {
	var missing []error
	for _, o := range m.Objects {
		i, err := store.Stat(ctx, o.Key)
		if err != nil {
			missing = append(missing, fmt.Errorf("object %s: %w", o.Key, err))
		} else if i.Size != o.SizeBytes {
			missing = append(missing, fmt.Errorf("object %s has %d bytes in the store, the manifest says %d", o.Key, i.Size, o.SizeBytes))
		}
	}
	if len(missing) > 0 {
		return fmt.Errorf("refusing to restore: the store %s lacks %d object(s) the backup lists and does not hold: %w", store.Name(), len(missing), errors.Join(missing...))
	}
	return nil
}

// pgConnection splits a database URL for the PostgreSQL programs: the password goes
// into PGPASSWORD, not onto the command line where other users could read it.
func pgConnection(dbURL string) (name string, env []string) {
	u, err := url.Parse(dbURL)
	if err != nil || (u.Scheme != "postgres" && u.Scheme != "postgresql") || u.User == nil {
		return dbURL, nil
	}
	pw, ok := u.User.Password()
	if !ok {
		return dbURL, nil
	}
	u.User = url.User(u.User.Username())
	return u.String(), []string{"PGPASSWORD=" + pw}
}
