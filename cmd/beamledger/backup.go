package main

import (
	"bufio"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"time"

	"beamledger/provenance"
	"beamledger/server"
	"beamledger/storage/objects"
	"beamledger/storage/postgres"
)

// backupFormat names the layout of a backup folder, checked by restore.
const backupFormat = "beamledger-backup 1"

// Inside a backup folder.
const (
	manifestFile = "manifest.json"
	dumpFile     = "database.dump"
	objectsDir   = "objects"
)

// manifest describes a backup: the database dump with its digest, and every object
// stored records pointed to when the dump's snapshot was taken.
type manifest struct {
	Format        string         `json:"format"`
	CreatedAt     time.Time      `json:"created_at"`
	Version       string         `json:"beamledger_version"`
	SchemaVersion int64          `json:"schema_version"`
	Database      manifestFileID `json:"database"`
	// ObjectStore names the store the objects were read from ("s3://bucket").
	ObjectStore string `json:"object_store"`
	// ObjectsCopied says the objects are in the backup under objects/<key>; without
	// it the backup only lists them, and they stay where ObjectStore says.
	ObjectsCopied bool             `json:"objects_copied"`
	ObjectCount   int              `json:"object_count"`
	ObjectBytes   int64            `json:"object_bytes"`
	Objects       []manifestObject `json:"objects"`
}

type manifestFileID struct {
	File      string `json:"file"`
	SHA256    string `json:"sha256"`
	SizeBytes int64  `json:"size_bytes"`
}

type manifestObject struct {
	Key       string `json:"key"`
	SHA256    string `json:"sha256"`
	SizeBytes int64  `json:"size_bytes"`
}

const backupUsage = `usage: beamledger backup [-with-objects=false] [-pg-bin DIR] DIR

Writes a consistent backup into DIR (new or empty): the database as a pg_dump
custom-format archive, taken on an exported snapshot, and manifest.json listing
every stored object's key, SHA-256 and size as of that same snapshot. With
-with-objects (the default) the objects are copied under DIR/objects/ and each copy
is checked against its digest; without, the manifest only records where they are.
The database and object store come from BEAMLEDGER_* as for serve.
`

// cmdBackup writes a backup folder.
func cmdBackup(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	var withObjects *bool
	c, err := parseBackupCommand(backupCommandSpec{name: "backup", usage: backupUsage, folder: "folder", tool: "pg_dump",
		flags: func(fs *flag.FlagSet, _ *envFlags, _ *server.Config) {
			withObjects = fs.Bool("with-objects", true, "copy the objects into the backup (false: list them only)")
		}}, args, stderr)
	if err != nil {
		return err
	}
	cfg, dir := c.cfg, c.dir
	if err := emptyFolder(dir); err != nil {
		return err
	}
	db, dbURL, err := openBackupDatabase(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	store, err := server.OpenObjects(cfg)
	if err != nil {
		return err
	}
	m := manifest{Format: backupFormat, CreatedAt: time.Now().UTC(), Version: buildVersion(), ObjectStore: store.Name(),
		ObjectsCopied: *withObjects, Objects: []manifestObject{}}
	err = db.WithBackupSnapshot(ctx, func(snap *postgres.BackupSnapshot) error {
		if m.SchemaVersion, err = snap.SchemaVersion(ctx); err != nil {
			return err
		}
		name, env := pgConnection(dbURL)
		if err := runPGTool(ctx, env, c.tool, "--format=custom", "--no-owner", "--no-acl", "--snapshot="+snap.Name,
			"--file="+filepath.Join(dir, dumpFile), "--dbname="+name); err != nil {
			return fmt.Errorf("pg_dump: %w", err)
		}
		return snap.StoredObjects(ctx, func(o provenance.StoredObject) error {
			m.Objects = append(m.Objects, manifestObject{Key: o.Key, SHA256: o.SHA256, SizeBytes: o.SizeBytes})
			return nil
		})
	})
	if err != nil {
		return err
	}
	if m.Database, err = digestFile(filepath.Join(dir, dumpFile)); err != nil {
		return err
	}
	m.Database.File = dumpFile
	for _, o := range m.Objects {
		m.ObjectCount++
		m.ObjectBytes += o.SizeBytes
		if *withObjects {
			if err := copyObjectOut(ctx, store, o, filepath.Join(dir, objectsDir)); err != nil {
				return err
			}
		}
	}
	if err := writeManifest(filepath.Join(dir, manifestFile), m); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "backup %s: schema version %d, database dump %s, %d objects (%s)%s\n", dir, m.SchemaVersion,
		byteSize(m.Database.SizeBytes), m.ObjectCount, byteSize(m.ObjectBytes), map[bool]string{true: " copied", false: " listed, not copied"}[*withObjects])
	return nil
}

// pgBinFlag registers -pg-bin, the folder of pg_dump and pg_restore.
func pgBinFlag(e *envFlags) *string {
	dir := ""
	e.str(&dir, "pg-bin", "BEAMLEDGER_PG_BIN", "folder holding pg_dump and pg_restore (default: PATH, then /usr/lib/postgresql/*/bin)")
	return &dir
}

// pgTool finds a PostgreSQL client program: in dir when given, else on PATH, else in
// the newest Debian per-version folder (which packages keep off PATH).
func pgTool(dir, name string) (string, error) {
	if dir != "" {
		p := filepath.Join(dir, name)
		if _, err := os.Stat(p); err != nil {
			return "", fmt.Errorf("-pg-bin: %w", err)
		}
		return p, nil
	}
	if p, err := exec.LookPath(name); err == nil {
		return p, nil
	}
	found, _ := filepath.Glob("/usr/lib/postgresql/*/bin/" + name)
	slices.SortFunc(found, func(a, b string) int { return pgMajor(b) - pgMajor(a) })
	if len(found) > 0 {
		return found[0], nil
	}
	return "", fmt.Errorf("%s not found on PATH or under /usr/lib/postgresql/*/bin: install the PostgreSQL client (apt-get install postgresql-client) or give -pg-bin", name)
}

func pgMajor(path string) int {
	n, _ := strconv.Atoi(filepath.Base(filepath.Dir(filepath.Dir(path))))
	return n
}

// runPGTool runs a PostgreSQL program with env added to the environment, returning
// its standard error in the error.
func runPGTool(ctx context.Context, env []string, program string, args ...string) error {
	cmd := exec.CommandContext(ctx, program, args...)
	cmd.Env = append(os.Environ(), env...)
	var errOut strings.Builder
	cmd.Stderr = &errOut
	if err := cmd.Run(); err != nil {
		return fmt.Errorf("%w: %s", err, strings.TrimSpace(errOut.String()))
	}
	return nil
}

// emptyFolder makes dir, or accepts it when it exists and is empty.
func emptyFolder(dir string) error {
	entries, err := os.ReadDir(dir)
	switch {
	case errors.Is(err, os.ErrNotExist):
		return os.MkdirAll(dir, 0o700)
	case err != nil:
		return err
	case len(entries) > 0:
		return fmt.Errorf("backup folder %s is not empty", dir)
	}
	return nil
}

// digestFile reads a file's SHA-256 and size.
func digestFile(path string) (manifestFileID, error) {
	f, err := os.Open(path)
	if err != nil {
		return manifestFileID{}, err
	}
	defer f.Close()
	h := sha256.New()
	n, err := io.Copy(h, f)
	if err != nil {
		return manifestFileID{}, err
	}
	return manifestFileID{SHA256: hex.EncodeToString(h.Sum(nil)), SizeBytes: n}, nil
}

// copyObjectOut copies one object into the backup, checking its digest and size on
// the way: a backup must not carry a corrupt object as if it were sound.
func copyObjectOut(ctx context.Context, store objects.Store, o manifestObject, root string) error {
	path, err := objectPath(root, o)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o700); err != nil {
		return err
	}
	r, err := store.Open(ctx, o.Key, 0, -1)
	if err != nil {
		return fmt.Errorf("object %s: %w", o.Key, err)
	}
	defer r.Close()
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return err
	}
	h := sha256.New()
	n, err := io.Copy(io.MultiWriter(f, h), r)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("object %s: %w", o.Key, err)
	}
	if got := hex.EncodeToString(h.Sum(nil)); got != o.SHA256 || n != o.SizeBytes {
		return fmt.Errorf("object %s in the store has SHA-256 %s and %d bytes, its record says %s and %d: run beamledger scrub", o.Key, got, n, o.SHA256, o.SizeBytes)
	}
	return nil
}

// objectPath is where an object sits in a backup; only content addresses are
// accepted, so a manifest cannot name a path outside the folder.
func objectPath(root string, o manifestObject) (string, error) {
	if len(o.SHA256) != 64 || strings.Trim(o.SHA256, "0123456789abcdef") != "" || o.Key != provenance.ObjectKey(o.SHA256) {
		return "", fmt.Errorf("manifest: object %q with SHA-256 %q is not a content address", o.Key, o.SHA256)
	}
	return filepath.Join(root, filepath.FromSlash(o.Key)), nil
}

// writeManifest writes the manifest as JSON with one object per line, so that a
// change shows as one changed line, and syncs it.
func writeManifest(path string, m manifest) error {
	objs := m.Objects
	m.Objects = nil
	head, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		return err
	}
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return err
	}
	w := bufio.NewWriter(f)
	// The head ends with `"objects": null` and the closing brace.
	w.Write(head[:len(head)-len("null\n}")])
	w.WriteString("[")
	for i, o := range objs {
		line, _ := json.Marshal(o)
		if i > 0 {
			w.WriteString(",")
		}
		w.WriteString("\n    ")
		w.Write(line)
	}
	w.WriteString("\n  ]\n}\n")
	err = w.Flush()
	if err == nil {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return err
}
