// Package chromium finds the headless browser the web tests drive, installing
// Debian's chromium package with apt-get when it is missing and the caller is
// root, the way deploy/pgcluster installs PostgreSQL. Nothing is cached in the
// checkout: the browser lives where the package puts it.
package chromium

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"strings"
)

// InstallCommand is the command a non-root user is asked to run.
const InstallCommand = "sudo apt-get install -y chromium"

// names are the executables looked for on PATH, Debian's first.
var names = []string{"chromium", "chromium-browser", "google-chrome", "headless_shell"}

// Find returns the path of an installed browser.
func Find() (string, error) {
	for _, n := range names {
		if p, err := exec.LookPath(n); err == nil {
			return p, nil
		}
	}
	return "", errors.New("no chromium browser on PATH")
}

// Ensure returns the installed browser, installing Debian's chromium package
// first when none is found and the caller is root. Progress goes to log (nil
// discards it). A non-root caller gets an error naming InstallCommand.
func Ensure(ctx context.Context, log io.Writer) (string, error) {
	if log == nil {
		log = io.Discard
	}
	if p, err := Find(); err == nil {
		return p, nil
	}
	if os.Geteuid() != 0 {
		return "", fmt.Errorf("no chromium browser on PATH; install it with\n    %s\nand rerun", InstallCommand)
	}
	fmt.Fprintln(log, "chromium: not found; installing the chromium package")
	if err := aptGet(ctx, log, "update"); err != nil {
		return "", err
	}
	if err := aptGet(ctx, log, "install", "-y", "--no-install-recommends", "chromium"); err != nil {
		return "", err
	}
	p, err := Find()
	if err != nil {
		return "", fmt.Errorf("after installing chromium: %w", err)
	}
	fmt.Fprintf(log, "chromium: ready at %s\n", p)
	return p, nil
}

// aptGet runs apt-get without prompts, quoting the end of its output in the
// error, which is where apt explains a failure.
func aptGet(ctx context.Context, log io.Writer, args ...string) error {
	fmt.Fprintf(log, "chromium: apt-get %v\n", args)
	var out bytes.Buffer
	cmd := exec.CommandContext(ctx, "apt-get", args...)
	cmd.Env = append(os.Environ(), "DEBIAN_FRONTEND=noninteractive")
	cmd.Stdout = io.MultiWriter(log, &out)
	cmd.Stderr = cmd.Stdout
	if err := cmd.Run(); err != nil {
		lines := strings.Split(strings.TrimRight(out.String(), "\n"), "\n")
		if len(lines) > 20 {
			lines = lines[len(lines)-20:]
		}
		return fmt.Errorf("apt-get %v: %w\n%s", args, err, strings.Join(lines, "\n"))
	}
	return nil
}
