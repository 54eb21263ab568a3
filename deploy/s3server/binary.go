package s3server

import (
	"context"
	"debug/buildinfo"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"time"
)

const (
	// Version is the versitygw release the tests run against; REFERENCE.md
	// §4 records what was seen with it.
	Version = "v1.8.0"
	// module and command name what `go install` builds.
	module  = "github.com/versity/versitygw"
	command = module + "/cmd/versitygw"
	// binaryName is the installed program's file name.
	binaryName = "versitygw"
)

// DefaultBinDir is .cache/bin in the module that holds the working folder,
// found by walking up to go.mod, so that tests run from any package folder
// share the one build.
func DefaultBinDir() (string, error) {
	dir, err := os.Getwd()
	if err != nil {
		return "", err
	}
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			return filepath.Join(dir, ".cache", "bin"), nil
		}
		parent := filepath.Dir(dir)
		if parent == dir {
			return "", errors.New("s3server: no go.mod above the working folder to put .cache/bin beside")
		}
		dir = parent
	}
}

// EnsureBinary returns the path of versitygw Version in binDir (DefaultBinDir
// when empty), building it with `go install` when it is missing, another
// version, or does not run. The first build compiles versitygw and its
// dependencies, a couple of minutes on two cores; progress goes to log.
func EnsureBinary(ctx context.Context, binDir string, log io.Writer) (string, error) {
	if binDir == "" {
		var err error
		if binDir, err = DefaultBinDir(); err != nil {
			return "", err
		}
	}
	path := filepath.Join(binDir, binaryName)
	if usable(ctx, path) {
		return path, nil
	}
	goCmd, err := exec.LookPath("go")
	if err != nil {
		return "", fmt.Errorf("s3server: versitygw is not built yet and no go command is on PATH to build it: %w", err)
	}
	if err := os.MkdirAll(binDir, 0o755); err != nil {
		return "", fmt.Errorf("s3server: %w", err)
	}
	fmt.Fprintf(log, "s3server: building versitygw %s into %s (once; takes a few minutes)\n", Version, binDir)
	start := time.Now()
	cmd := exec.CommandContext(ctx, goCmd, "install", command+"@"+Version)
	// Outside any module or workspace, so the checkout's go.mod and a
	// go.work cannot change what gets built.
	cmd.Dir = os.TempDir()
	cmd.Env = append(os.Environ(), "GOBIN="+binDir, "GOWORK=off", "GOFLAGS=-buildvcs=false")
	out := &limitedBuffer{max: 8 << 10}
	// One writer for both streams, so exec copies them with one goroutine.
	w := io.MultiWriter(log, out)
	cmd.Stdout, cmd.Stderr = w, w
	if err := cmd.Run(); err != nil {
		return "", fmt.Errorf("s3server: go install %s@%s: %w\n%s", command, Version, err, out)
	}
	if !usable(ctx, path) {
		return "", fmt.Errorf("s3server: go install %s@%s finished but %s does not run", command, Version, path)
	}
	fmt.Fprintf(log, "s3server: built versitygw in %s\n", time.Since(start).Round(time.Second))
	return path, nil
}

// usable reports whether path is versitygw Version and runs. The version is
// read from the build information Go embeds: `versitygw --version` prints
// "git" for a `go install` build, since its Makefile is what sets it.
func usable(ctx context.Context, path string) bool {
	info, err := buildinfo.ReadFile(path)
	if err != nil || info.Main.Path != module || info.Main.Version != Version {
		return false
	}
	ctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	return exec.CommandContext(ctx, path, "--version").Run() == nil
}

// limitedBuffer keeps the last max bytes written to it, for error messages.
type limitedBuffer struct {
	buf []byte
	max int
}

func (b *limitedBuffer) Write(p []byte) (int, error) {
	b.buf = append(b.buf, p...)
	if over := len(b.buf) - b.max; over > 0 {
		b.buf = b.buf[over:]
	}
	return len(p), nil
}

func (b *limitedBuffer) String() string { return string(b.buf) }
