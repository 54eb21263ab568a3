package main

import (
	"bytes"
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"beamledger/storage/postgres/pgtest"
)

// TestScrubCommand runs `beamledger scrub` on an empty facility (nothing to find:
// exit 0), then with an object nobody recorded planted in the disk store (a finding:
// exit 3, the finding on stdout, progress on stderr).
func TestScrubCommand(t *testing.T) {
	url := pgtest.NewDatabase(t)
	dir := t.TempDir()
	t.Setenv("BEAMLEDGER_DATABASE_URL", url)
	t.Setenv("BEAMLEDGER_OBJECT_STORE", "disk")
	t.Setenv("BEAMLEDGER_OBJECT_DIR", dir)
	var out, errOut bytes.Buffer
	if err := run(context.Background(), []string{"scrub"}, &out, &errOut); err != nil {
		t.Fatalf("clean scrub: %v\n%s", err, errOut.String())
	}
	if !strings.Contains(errOut.String(), "scrub done: 0 of 0 objects") {
		t.Errorf("progress: %q", errOut.String())
	}
	key := filepath.Join(dir, "sha256", "ab", strings.Repeat("ab", 32))
	if err := os.MkdirAll(filepath.Dir(key), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(key, []byte("stray"), 0o644); err != nil {
		t.Fatal(err)
	}
	out.Reset()
	err := run(context.Background(), []string{"scrub"}, &out, &errOut)
	var ee *exitError
	if !errors.As(err, &ee) || exitCode(err) != exitFindings {
		t.Fatalf("scrub with a stray object: %v (exit %d)", err, exitCode(err))
	}
	if !strings.HasPrefix(out.String(), "unrecorded") || !strings.Contains(out.String(), "sha256/ab/abab") {
		t.Errorf("findings printed: %q", out.String())
	}
}
