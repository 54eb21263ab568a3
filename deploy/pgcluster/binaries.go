package pgcluster

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"time"
)

// ErrNoServer is returned (wrapped with where was looked) when no PostgreSQL
// server installation is found, so callers can offer to install one.
var ErrNoServer = errors.New("no PostgreSQL server binaries found")

// debianBinGlob matches the per-version binary directories of Debian and Ubuntu
// packages, which put initdb and pg_ctl off PATH on purpose.
const debianBinGlob = "/usr/lib/postgresql/*/bin"

// serverPrograms must all sit in one directory: pg_ctl starts the postgres next
// to itself, and a mixed installation would fail only at start time.
var serverPrograms = []string{"initdb", "pg_ctl", "postgres"}

// Binaries locates initdb, pg_ctl and postgres of one PostgreSQL installation.
type Binaries struct {
	// Dir holds initdb, pg_ctl and postgres, with symlinks resolved.
	Dir string
	// Version is the major version (15 for 15.4); a data directory only
	// works with the major version that created it.
	Version int
}

// Path returns the full path of the named program in b.Dir.
func (b Binaries) Path(program string) string { return filepath.Join(b.Dir, program) }

// FindBinaries looks for initdb on PATH, following symlinks to the directory
// that really holds it, and under /usr/lib/postgresql/*/bin, and returns the
// installation with the highest major version (the one on PATH when tied).
// It returns an error wrapping ErrNoServer when there is none.
func FindBinaries() (Binaries, error) {
	var candidates []string
	if p, err := exec.LookPath("initdb"); err == nil {
		candidates = append(candidates, filepath.Dir(p))
	}
	globbed, _ := filepath.Glob(debianBinGlob)
	candidates = append(candidates, globbed...)

	var best Binaries
	seen := map[string]bool{}
	for _, dir := range candidates {
		// initdb on PATH may be a symlink (/usr/local/bin/initdb ->
		// /usr/lib/postgresql/15/bin/initdb); pg_ctl and postgres are
		// found next to its target, not next to the link.
		if real, err := filepath.EvalSymlinks(filepath.Join(dir, "initdb")); err == nil {
			dir = filepath.Dir(real)
		}
		if seen[dir] {
			continue
		}
		seen[dir] = true
		if b, ok := probeBinaries(dir); ok && b.Version > best.Version {
			best = b
		}
	}
	if best.Dir == "" {
		return Binaries{}, fmt.Errorf("%w (looked for initdb, pg_ctl and postgres on PATH and in %s)", ErrNoServer, debianBinGlob)
	}
	return best, nil
}

var versionPattern = regexp.MustCompile(`\(PostgreSQL\) (\d+)`)

// probeBinaries reports the installation in dir, if dir holds one that runs.
func probeBinaries(dir string) (Binaries, bool) {
	for _, name := range serverPrograms {
		fi, err := os.Stat(filepath.Join(dir, name))
		if err != nil || !fi.Mode().IsRegular() || fi.Mode().Perm()&0o111 == 0 {
			return Binaries{}, false
		}
	}
	// postgres answers --version before its refusal to run as root, so this
	// works for every caller.
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	out, err := exec.CommandContext(ctx, filepath.Join(dir, "postgres"), "--version").Output()
	if err != nil {
		return Binaries{}, false
	}
	m := versionPattern.FindSubmatch(out)
	if m == nil {
		return Binaries{}, false
	}
	v, err := strconv.Atoi(string(m[1]))
	if err != nil {
		return Binaries{}, false
	}
	return Binaries{Dir: dir, Version: v}, true
}

// ShareDir returns the installation's share directory, the one holding
// extension/*.control files, asking pg_config first because packagers move it.
func (b Binaries) ShareDir() (string, error) {
	var candidates []string
	if out, err := exec.Command(b.Path("pg_config"), "--sharedir").Output(); err == nil {
		candidates = append(candidates, strings.TrimSpace(string(out)))
	}
	candidates = append(candidates,
		fmt.Sprintf("/usr/share/postgresql/%d", b.Version), // Debian, Ubuntu
		filepath.Join(filepath.Dir(b.Dir), "share"),        // source builds
		filepath.Join(filepath.Dir(b.Dir), "share", "postgresql"),
	)
	for _, dir := range candidates {
		if fi, err := os.Stat(filepath.Join(dir, "extension")); err == nil && fi.IsDir() {
			return dir, nil
		}
	}
	return "", fmt.Errorf("PostgreSQL %d in %s: no share directory with extensions found (tried %s)",
		b.Version, b.Dir, strings.Join(candidates, ", "))
}

// HasExtension reports whether the installation ships the named extension;
// the schema needs btree_gist for the booking exclusion constraint, and a
// missing one would otherwise surface only as a failed migration.
func (b Binaries) HasExtension(name string) bool {
	dir, err := b.ShareDir()
	if err != nil {
		return false
	}
	_, err = os.Stat(filepath.Join(dir, "extension", name+".control"))
	return err == nil
}
