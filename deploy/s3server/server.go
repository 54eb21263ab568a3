package s3server

import (
	"context"
	"crypto/rand"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"time"
)

const (
	// DefaultRegion is what the server calls its region unless told otherwise.
	DefaultRegion = "us-east-1"
	// startTimeout bounds the wait for a started server to answer.
	startTimeout = 30 * time.Second
	// stopGrace is how long Stop lets the server shut down before killing it.
	stopGrace = 5 * time.Second
	// portAttempts bounds the retries when another process takes the free
	// port between our probe and the server's bind.
	portAttempts = 3
)

// Options configure Start.
type Options struct {
	// Binary is versitygw's path, from EnsureBinary.
	Binary string
	// Region is the region the server reports (DefaultRegion when empty).
	Region string
	// Log receives the server's output (nothing when nil).
	Log io.Writer
	// Parent is where the server's temporary folder is made (os.TempDir
	// when empty). It must support extended attributes, where versitygw
	// keeps object metadata; ext4, xfs and btrfs do, tmpfs only since
	// Linux 6.6.
	Parent string
}

// Server is a running versitygw with the POSIX back end.
type Server struct {
	// Endpoint is host:port, as S3 clients want it (plain HTTP).
	Endpoint string
	// AccessKey and SecretKey are the root account's, generated per start.
	AccessKey, SecretKey string
	// Region is the region the server reports.
	Region string
	// Dir is the temporary folder holding the buckets (Dir/data) and the
	// server's log (Dir/server.log); Stop removes it.
	Dir string

	cmd      *exec.Cmd
	exited   chan struct{} // closed when the process has been waited for
	stopOnce sync.Once
	stopErr  error
}

// Start runs versitygw on a free 127.0.0.1 port over a new temporary folder
// and returns once it answers HTTP. A failed Start leaves nothing running and
// removes the folder.
func Start(ctx context.Context, opts Options) (*Server, error) {
	if opts.Binary == "" {
		return nil, errors.New("s3server: Options.Binary is empty (see EnsureBinary)")
	}
	if opts.Region == "" {
		opts.Region = DefaultRegion
	}
	if opts.Log == nil {
		opts.Log = io.Discard
	}
	dir, err := os.MkdirTemp(opts.Parent, "beamledger-s3-*")
	if err != nil {
		return nil, fmt.Errorf("s3server: %w", err)
	}
	data := filepath.Join(dir, "data")
	if err := os.Mkdir(data, 0o700); err != nil {
		os.RemoveAll(dir)
		return nil, fmt.Errorf("s3server: %w", err)
	}
	for attempt := 1; ; attempt++ {
		s := &Server{
			AccessKey: rand.Text()[:20],
			SecretKey: rand.Text(),
			Region:    opts.Region,
			Dir:       dir,
		}
		err := s.start(ctx, opts, data)
		if err == nil {
			return s, nil
		}
		s.kill()
		if !errors.Is(err, errPortTaken) || attempt == portAttempts {
			os.RemoveAll(dir)
			return nil, err
		}
	}
}

// errPortTaken marks a start that failed because another process bound the port.
var errPortTaken = errors.New("port taken")

// start launches the server on a free port and waits until it answers.
func (s *Server) start(ctx context.Context, opts Options, data string) error {
	port, err := freePort()
	if err != nil {
		return err
	}
	s.Endpoint = net.JoinHostPort("127.0.0.1", strconv.Itoa(port))
	logPath := filepath.Join(s.Dir, "server.log")
	logFile, err := os.OpenFile(logPath, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, 0o600)
	if err != nil {
		return fmt.Errorf("s3server: %w", err)
	}
	// The child writes through a pipe that a goroutine of os/exec copies into
	// logFile and opts.Log (a MultiWriter is not a file the child can be
	// given). logFile stays open until the process is waited for: closed any
	// earlier, the copying stops at the child's next line, its pipe breaks,
	// and versitygw (a Go program) dies of SIGPIPE at the line after that.
	closeLog := true
	defer func() {
		if closeLog {
			logFile.Close()
		}
	}()

	// Keys go in the environment rather than on the command line, where
	// any user could read them with ps. These are the first names
	// versitygw looks up, so a ROOT_* variable we inherit cannot win.
	cmd := exec.Command(opts.Binary,
		"--port", s.Endpoint, "--region", s.Region, "--quiet",
		"posix", data)
	cmd.Env = append(os.Environ(), "ROOT_ACCESS_KEY_ID="+s.AccessKey, "ROOT_SECRET_ACCESS_KEY="+s.SecretKey)
	w := io.MultiWriter(logFile, opts.Log)
	cmd.Stdout, cmd.Stderr = w, w
	// Its own process group, so Stop reaches anything it starts; and
	// killed with us if we die first, so a crashed harness leaves no
	// server behind.
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true, Pdeathsig: syscall.SIGKILL}
	if err := cmd.Start(); err != nil {
		return fmt.Errorf("s3server: starting %s: %w", opts.Binary, err)
	}
	s.cmd = cmd
	s.exited = make(chan struct{})
	closeLog = false
	go func() {
		_ = cmd.Wait() // returns once the copying is done
		logFile.Close()
		close(s.exited)
	}()
	if err := s.waitReady(ctx); err != nil {
		tail := lastLines(logPath, 20)
		if strings.Contains(tail, "address already in use") {
			err = fmt.Errorf("%w: %w", errPortTaken, err)
		}
		return fmt.Errorf("%w\n%s", err, tail)
	}
	return nil
}

// waitReady polls until the server answers any HTTP response (an anonymous
// request gets 403, which is enough to know it serves S3).
func (s *Server) waitReady(ctx context.Context) error {
	ctx, cancel := context.WithTimeout(ctx, startTimeout)
	defer cancel()
	client := &http.Client{Timeout: time.Second}
	for {
		req, err := http.NewRequestWithContext(ctx, http.MethodGet, "http://"+s.Endpoint+"/", nil)
		if err != nil {
			return err
		}
		if resp, err := client.Do(req); err == nil {
			resp.Body.Close()
			return nil
		}
		select {
		case <-s.exited:
			return fmt.Errorf("s3server: versitygw exited during start-up (%v)", s.cmd.ProcessState)
		case <-ctx.Done():
			return fmt.Errorf("s3server: versitygw did not answer on %s: %w", s.Endpoint, ctx.Err())
		case <-time.After(50 * time.Millisecond):
		}
	}
}

// Stop shuts the server down (SIGTERM to its process group, SIGKILL after a
// grace period) and removes Dir. Calling it again does nothing.
func (s *Server) Stop() error {
	s.stopOnce.Do(func() {
		s.kill()
		if err := os.RemoveAll(s.Dir); err != nil {
			s.stopErr = fmt.Errorf("s3server: %w", err)
		}
	})
	return s.stopErr
}

// kill ends the process group and waits for the server to be reaped.
func (s *Server) kill() {
	if s.cmd == nil || s.cmd.Process == nil {
		return
	}
	pgid := s.cmd.Process.Pid
	_ = syscall.Kill(-pgid, syscall.SIGTERM)
	select {
	case <-s.exited:
	case <-time.After(stopGrace):
		_ = syscall.Kill(-pgid, syscall.SIGKILL)
		<-s.exited
	}
}

// freePort asks the kernel for a port no one listens on. Another process
// may take it before the server binds it; Start retries then.
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, fmt.Errorf("s3server: finding a free port: %w", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}

// lastLines returns up to n last lines of a file, for error messages.
func lastLines(path string, n int) string {
	raw, err := os.ReadFile(path)
	if err != nil {
		return ""
	}
	lines := strings.Split(strings.TrimRight(string(raw), "\n"), "\n")
	if len(lines) > n {
		lines = lines[len(lines)-n:]
	}
	return strings.Join(lines, "\n")
}
