package s3server

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net/http"
	"os"
	"path/filepath"
	"strings"
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

// envStandIn makes the test binary, run as the server, a stand-in for versitygw
// (see standIn).
const envStandIn = "BEAMLEDGER_S3SERVER_STAND_IN"

func TestMain(m *testing.M) {
	if os.Getenv(envStandIn) != "" {
		standIn()
		return
	}
	os.Exit(m.Run())
}

// standIn serves HTTP on the --port it is given, as versitygw is started, and
// writes a line to its standard error for every request, as versitygw does
// for some: a Go program whose output pipe is broken dies of SIGPIPE there.
func standIn() {
	var addr string
	for i, a := range os.Args {
		if a == "--port" && i+1 < len(os.Args) {
			addr = os.Args[i+1]
		}
	}
	_ = http.ListenAndServe(addr, http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		fmt.Fprintf(os.Stderr, "stand-in: %s %s\n", r.Method, r.URL.Path)
		w.WriteHeader(http.StatusForbidden)
	}))
}

// TestServerOutputAfterStart: the server may write to its output at any time
// after Start returns, and must neither die of it nor lose the lines. The
// server's log used to be closed when Start returned, which stopped the copying
// of its output at its next line and killed it (SIGPIPE) at the one after.
func TestServerOutputAfterStart(t *testing.T) {
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	t.Setenv(envStandIn, "1")
	for name, log := range map[string]io.Writer{"no log": nil, "a log": io.Discard} {
		t.Run(name, func(t *testing.T) {
			s, err := Start(t.Context(), Options{Binary: exe, Log: log})
			if err != nil {
				t.Fatal(err)
			}
			t.Cleanup(func() { _ = s.Stop() })
			client := &http.Client{Timeout: 5 * time.Second}
			for i := range 5 {
				resp, err := client.Get("http://" + s.Endpoint + "/after-start")
				if err != nil {
					t.Fatalf("request %d after Start: %v (the server died of its own output?)", i+1, err)
				}
				resp.Body.Close()
			}
			select {
			case <-s.exited:
				t.Fatalf("the server exited: %v", s.cmd.ProcessState)
			default:
			}
			// The lines are copied into the log as they come: wait for the last.
			var b []byte
			for deadline := time.Now().Add(5 * time.Second); ; time.Sleep(10 * time.Millisecond) {
				if b, err = os.ReadFile(filepath.Join(s.Dir, "server.log")); err != nil {
					t.Fatal(err)
				}
				if n := strings.Count(string(b), "GET /after-start"); n == 5 || time.Now().After(deadline) {
					if n != 5 {
						t.Errorf("the log holds %d of the 5 lines written after Start:\n%s", n, b)
					}
					break
				}
			}
		})
	}
}
