package pgcluster

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/exec"
)

// InstallCommand is the command a non-root user is asked to run when the
// server or its contrib extensions are missing.
const InstallCommand = "sudo apt-get install -y postgresql postgresql-contrib"

// requiredExtension is the extension the schema cannot do without.
const requiredExtension = "btree_gist"

// EnsureBinaries returns the installed PostgreSQL server, installing it with
// apt-get when it (or its btree_gist extension) is missing and the caller is
// root, so a fresh Debian machine or CI image needs no manual step. Progress
// goes to log (nil discards it). A non-root caller gets an error naming
// InstallCommand instead.
func EnsureBinaries(ctx context.Context, log io.Writer) (Binaries, error) {
	if log == nil {
		log = io.Discard
	}
	b, err := FindBinaries()
	if err == nil && b.HasExtension(requiredExtension) {
		return b, nil
	}
	if os.Geteuid() != 0 {
		if err != nil {
			return Binaries{}, fmt.Errorf("%w; install it with\n    %s\nand rerun", err, InstallCommand)
		}
		return Binaries{}, fmt.Errorf("PostgreSQL %d in %s lacks the %s extension; install it with\n    %s\nand rerun",
			b.Version, b.Dir, requiredExtension, InstallCommand)
	}

	updated := false
	if err != nil {
		fmt.Fprintf(log, "pgcluster: %v; installing the postgresql package\n", err)
		if err := aptGet(ctx, log, "update"); err != nil {
			return Binaries{}, err
		}
		updated = true
		if err := aptGet(ctx, log, "install", "-y", "postgresql"); err != nil {
			return Binaries{}, err
		}
		if b, err = FindBinaries(); err != nil {
			return Binaries{}, fmt.Errorf("after installing postgresql: %w", err)
		}
	}
	if !b.HasExtension(requiredExtension) {
		fmt.Fprintf(log, "pgcluster: PostgreSQL %d lacks %s; installing postgresql-contrib\n", b.Version, requiredExtension)
		if !updated {
			if err := aptGet(ctx, log, "update"); err != nil {
				return Binaries{}, err
			}
		}
		if err := aptGet(ctx, log, "install", "-y", "postgresql-contrib"); err != nil {
			return Binaries{}, err
		}
		if !b.HasExtension(requiredExtension) {
			return Binaries{}, fmt.Errorf("PostgreSQL %d in %s still lacks the %s extension after installing postgresql-contrib",
				b.Version, b.Dir, requiredExtension)
		}
	}
	fmt.Fprintf(log, "pgcluster: PostgreSQL %d ready in %s\n", b.Version, b.Dir)
	return b, nil
}

// aptGet runs apt-get without prompts, copying its output to log and quoting
// the end of it in the error, which is where apt explains a failure.
func aptGet(ctx context.Context, log io.Writer, args ...string) error {
	fmt.Fprintf(log, "pgcluster: apt-get %v\n", args)
	out := newTailBuffer(16 << 10)
	cmd := exec.CommandContext(ctx, "apt-get", args...)
	cmd.Env = append(os.Environ(), "DEBIAN_FRONTEND=noninteractive")
	cmd.Stdout = io.MultiWriter(log, out)
	cmd.Stderr = cmd.Stdout
	if err := cmd.Run(); err != nil {
		return fmt.Errorf("apt-get %v: %w\n%s", args, err, out.lastLines(20))
	}
	return nil
}
