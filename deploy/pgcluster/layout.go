package pgcluster

import (
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
)

// ClusterRoot holds the clusters of root callers whose requested directory
// the postgres user cannot reach. It lives outside any home directory so that
// every parent is world-searchable on a stock system.
const ClusterRoot = "/var/lib/beamledger/clusters"

// placement says where a cluster's files go.
type placement struct {
	dataDir  string // the directory the caller asked for, absolute
	realDir  string // the data directory proper (PG_VERSION lives here)
	tempBase string // throwaway only: the directory Stop removes
}

// place decides, and prepares, the directories for opts.
func place(opts Options, acct account, log io.Writer) (placement, error) {
	if opts.Throwaway {
		return placeThrowaway(acct)
	}
	abs, err := filepath.Abs(opts.DataDir)
	if err != nil {
		return placement{}, err
	}
	pl := placement{dataDir: abs}

	fi, err := os.Lstat(abs)
	switch {
	case err == nil && fi.Mode()&fs.ModeSymlink != 0:
		// A link left by an earlier run (or made by hand): the data is
		// wherever it points.
		target, err := os.Readlink(abs)
		if err != nil {
			return placement{}, err
		}
		if !filepath.IsAbs(target) {
			target = filepath.Join(filepath.Dir(abs), target)
		}
		pl.realDir = target
		return pl, prepareDataDir(target, acct)
	case err == nil && !fi.IsDir():
		return placement{}, fmt.Errorf("data directory %s exists and is not a directory", abs)
	case err != nil && !errors.Is(err, fs.ErrNotExist):
		return placement{}, err
	}

	parent := filepath.Dir(abs)
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return placement{}, err
	}
	reachable, err := acct.canReach(parent)
	if err != nil {
		return placement{}, err
	}
	if reachable {
		pl.realDir = abs
		return pl, prepareDataDir(abs, acct)
	}

	// Root with a directory the postgres user cannot reach (a checkout under
	// /root, a 0700 temp dir): keep the data where it can, and leave a link
	// so the requested path still leads to it and the next run reuses it.
	if fi != nil {
		if err := os.Remove(abs); err != nil { // only succeeds when empty
			return placement{}, fmt.Errorf("data directory %s is not reachable by the %s user and is not empty; move it or remove it: %w",
				abs, serverUserName, err)
		}
	}
	pl.realDir = filepath.Join(ClusterRoot, clusterName(abs))
	// A cluster there with no link to it is what is left after someone deleted the
	// data directory (rm -rf .data to start afresh): its link, and the password beside
	// it, are gone, so it is discarded too rather than reused with credentials nobody
	// has any more.
	if _, err := os.Stat(pl.realDir); err == nil {
		fmt.Fprintf(log, "pgcluster: discarding %s, left behind by a deleted %s\n", pl.realDir, abs)
		if err := os.RemoveAll(pl.realDir); err != nil {
			return placement{}, err
		}
	}
	if err := prepareDataDir(pl.realDir, acct); err != nil {
		return placement{}, err
	}
	if err := os.Symlink(pl.realDir, abs); err != nil {
		return placement{}, err
	}
	fmt.Fprintf(log, "pgcluster: %s is not reachable by the %s user; the cluster lives in %s, linked from there\n",
		parent, serverUserName, pl.realDir)
	return pl, nil
}

// clusterName derives a stable directory name from the requested path, so
// the same checkout always finds the same cluster.
func clusterName(absDataDir string) string {
	sum := sha256.Sum256([]byte(absDataDir))
	return hex.EncodeToString(sum[:])[:16]
}

// prepareDataDir creates dir (and world-searchable parents) and hands it to
// the account with the 0700 mode the server insists on.
func prepareDataDir(dir string, acct account) error {
	parent := filepath.Dir(dir)
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return err
	}
	if parent == ClusterRoot {
		// The caller's umask may have made these 0700, which would lock the
		// postgres user out of its own cluster.
		for _, d := range []string{filepath.Dir(ClusterRoot), ClusterRoot} {
			if err := os.Chmod(d, 0o755); err != nil {
				return err
			}
		}
	}
	if err := os.Mkdir(dir, 0o700); err != nil && !errors.Is(err, fs.ErrExist) {
		return err
	}
	if err := acct.own(dir); err != nil {
		return err
	}
	return os.Chmod(dir, 0o700)
}

// placeThrowaway makes a fresh temp directory the account can reach, with the
// data directory inside it (the server rejects a 0755 data directory).
func placeThrowaway(acct account) (placement, error) {
	parent := os.TempDir()
	if ok, err := acct.canReach(parent); err != nil || !ok {
		// TMPDIR may point into root's home; fall back to places the
		// postgres user can always reach.
		parent = "/tmp"
		if ok, err := acct.canReach(parent); err != nil || !ok {
			parent = ClusterRoot
			if err := os.MkdirAll(parent, 0o755); err != nil {
				return placement{}, err
			}
		}
	}
	base, err := os.MkdirTemp(parent, "beamledger-pg-*")
	if err != nil {
		return placement{}, err
	}
	pl := placement{tempBase: base, realDir: filepath.Join(base, "data")}
	pl.dataDir = pl.realDir
	err = os.Chmod(base, 0o755)
	if err == nil {
		err = acct.own(base)
	}
	if err == nil {
		err = prepareDataDir(pl.realDir, acct)
	}
	if err != nil {
		os.RemoveAll(base)
		return placement{}, err
	}
	return pl, nil
}
