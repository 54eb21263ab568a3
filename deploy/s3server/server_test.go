package s3server

import (
	"context"
	"errors"
	"io"
	"io/fs"
	"net/http"
	"os"
	"syscall"
	"testing"
	"time"
)

// TestStartStop starts a real versitygw, checks that it serves S3 (an
// unsigned request is refused with 403, as S3 refuses it) and that Stop ends
// the process and removes its folder.
func TestStartStop(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and runs versitygw")
	}
	ctx := t.Context()
	bin, err := EnsureBinary(ctx, "", io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	s, err := Start(ctx, Options{Binary: bin})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = s.Stop() })
	if s.AccessKey == "" || s.SecretKey == "" || s.Region != DefaultRegion {
		t.Fatalf("credentials or region missing: %+v", s)
	}

	resp, err := http.Get("http://" + s.Endpoint + "/")
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusForbidden {
		t.Fatalf("anonymous GET / answered %d, want 403", resp.StatusCode)
	}

	pid := s.cmd.Process.Pid
	if err := s.Stop(); err != nil {
		t.Fatal(err)
	}
	if err := syscall.Kill(pid, 0); !errors.Is(err, syscall.ESRCH) {
		t.Errorf("server process %d still there after Stop (kill 0: %v)", pid, err)
	}
	if _, err := os.Stat(s.Dir); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("%s still there after Stop (%v)", s.Dir, err)
	}
	client := &http.Client{Timeout: time.Second}
	if resp, err := client.Get("http://" + s.Endpoint + "/"); err == nil {
		resp.Body.Close()
		t.Errorf("%s still answers after Stop", s.Endpoint)
	}
	if err := s.Stop(); err != nil {
		t.Errorf("second Stop: %v", err)
	}
}

// TestStartFailsCleanly runs something that is not versitygw: Start must
// report it and leave no folder behind.
func TestStartFailsCleanly(t *testing.T) {
	parent := t.TempDir()
	ctx, cancel := context.WithTimeout(t.Context(), 10*time.Second)
	defer cancel()
	if _, err := Start(ctx, Options{Binary: "/bin/false", Parent: parent}); err == nil {
		t.Fatal("Start with /bin/false succeeded")
	}
	if left, _ := os.ReadDir(parent); len(left) != 0 {
		t.Errorf("a failed Start left %s in %s", left[0].Name(), parent)
	}
}

// TestEnsureBinaryCached checks the cache: a second call must not rebuild
// (it would take minutes) and must return the same program.
func TestEnsureBinaryCached(t *testing.T) {
	if testing.Short() {
		t.Skip("builds versitygw")
	}
	first, err := EnsureBinary(t.Context(), "", io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	second, err := EnsureBinary(t.Context(), "", io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if first != second {
		t.Errorf("paths differ: %s then %s", first, second)
	}
	if d := time.Since(start); d > 5*time.Second {
		t.Errorf("cached EnsureBinary took %s; it rebuilt", d)
	}
}
