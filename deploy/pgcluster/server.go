package pgcluster

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"
)

const (
	// serverLogName is the server's log file inside RealDir (pg_ctl -l); it
	// survives crashes, which is when it is needed.
	serverLogName = "server.log"
	// confName holds the settings Start owns, rewritten at every start and
	// included from postgresql.conf so its values win.
	confName    = "beamledger.conf"
	includeLine = "include_if_exists = '" + confName + "'"
	// maxSocketPath is what fits in sun_path (108 bytes with the NUL).
	maxSocketPath = 107
	// errorLogLines is how much of the server log a start failure quotes.
	errorLogLines = 20
)

// errPortTaken marks a start that failed because the port was in use.
var errPortTaken = errors.New("port already in use")

// initIfNeeded runs initdb unless RealDir already holds a cluster, and
// checks that an existing one matches the server's major version.
func (c *Cluster) initIfNeeded(ctx context.Context) error {
	raw, err := os.ReadFile(filepath.Join(c.RealDir, "PG_VERSION"))
	if err == nil {
		if v := strings.TrimSpace(string(raw)); v != strconv.Itoa(c.Binaries.Version) {
			return fmt.Errorf("pgcluster: %s holds a PostgreSQL %s cluster but the server is PostgreSQL %d; remove the directory (losing its data) or dump and restore it",
				c.RealDir, v, c.Binaries.Version)
		}
		return nil
	}
	if !errors.Is(err, fs.ErrNotExist) {
		return err
	}

	fmt.Fprintf(c.log, "pgcluster: creating a PostgreSQL %d cluster in %s\n", c.Binaries.Version, c.RealDir)
	auth := "trust"
	args := []string{"-D", c.RealDir, "-U", c.User, "-E", "UTF8", "--locale=C"}
	if c.Password != "" {
		auth = "scram-sha-256"
		pwfile, err := c.writePasswordFile()
		if err != nil {
			return err
		}
		defer os.Remove(pwfile)
		args = append(args, "--pwfile="+pwfile)
	}
	args = append(args, "--auth-local="+auth, "--auth-host="+auth)
	if c.Throwaway {
		args = append(args, "--no-sync")
	}
	out := newTailBuffer(16 << 10)
	cmd := c.acct.command(ctx, c.RealDir, c.Binaries.Path("initdb"), args...)
	cmd.Stdout = io.MultiWriter(c.log, out)
	cmd.Stderr = cmd.Stdout
	if err := cmd.Run(); err != nil {
		return fmt.Errorf("pgcluster: initdb in %s: %w\n%s", c.RealDir, err, out.lastLines(errorLogLines))
	}
	return nil
}

// writePasswordFile writes the password for initdb --pwfile next to the data
// directory (initdb wants the data directory empty, and the parent is known
// to be reachable by the server account), readable by that account only.
func (c *Cluster) writePasswordFile() (string, error) {
	f, err := os.CreateTemp(filepath.Dir(c.RealDir), ".beamledger-pw-*")
	if err != nil {
		return "", err
	}
	name := f.Name()
	_, err = f.WriteString(c.Password + "\n")
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = c.acct.own(name)
	}
	if err != nil {
		os.Remove(name)
		return "", err
	}
	return name, nil
}

// startServer writes this start's settings and runs pg_ctl start on port.
func (c *Cluster) startServer(ctx context.Context, port int) error {
	c.Port = port
	c.SocketDir = c.RealDir
	if len(filepath.Join(c.RealDir, ".s.PGSQL."+strconv.Itoa(port))) > maxSocketPath {
		c.SocketDir = ""
	}
	if err := c.writeConf(port); err != nil {
		return err
	}
	logPath := filepath.Join(c.RealDir, serverLogName)
	var logStart int64
	if fi, err := os.Stat(logPath); err == nil {
		logStart = fi.Size()
	}

	fmt.Fprintf(c.log, "pgcluster: starting PostgreSQL %d on 127.0.0.1:%d from %s\n", c.Binaries.Version, port, c.RealDir)
	out := newTailBuffer(8 << 10)
	cmd := c.acct.command(ctx, c.RealDir, c.Binaries.Path("pg_ctl"),
		"start", "-D", c.RealDir, "-l", logPath, "-w", "-t", "120", "-s")
	cmd.Env = withMallocTunables(cmd.Env)
	cmd.Stdout = io.MultiWriter(c.log, out)
	cmd.Stderr = cmd.Stdout
	runErr := cmd.Run()
	// Follow the log from this start on, also when it failed: Stop may
	// still have a server to stop, and its last words are worth seeing.
	c.follow.close() // an earlier attempt's, if any
	c.follow = followLog(logPath, logStart, c.log)
	if runErr != nil {
		tail := fileLastLines(logPath, errorLogLines)
		err := fmt.Errorf("pgcluster: pg_ctl start in %s: %w\n%s\n%s", c.RealDir, runErr, out.lastLines(5), tail)
		if strings.Contains(tail, "Address already in use") {
			err = fmt.Errorf("%w: %w", errPortTaken, err)
		}
		// pg_ctl may have given up while the server still came up.
		if info, _ := readPidFile(c.RealDir); info != nil && processAlive(info.pid) {
			c.pid = info.pid
		}
		return err
	}
	info, err := readPidFile(c.RealDir)
	if err != nil || info == nil {
		return fmt.Errorf("pgcluster: server started but postmaster.pid is unreadable: %v", err)
	}
	c.pid = info.pid
	return nil
}

// writeConf writes the settings Start owns and makes sure postgresql.conf
// includes them. A file rather than pg_ctl -o keeps paths out of a shell
// command line and lets anyone restart the cluster by hand with pg_ctl.
func (c *Cluster) writeConf(port int) error {
	var b strings.Builder
	b.WriteString("# Written by beamledger's pgcluster at every start; edits are lost.\n")
	fmt.Fprintf(&b, "listen_addresses = '127.0.0.1'\nport = %d\n", port)
	fmt.Fprintf(&b, "unix_socket_directories = %s\n", confQuote(c.SocketDir))
	if c.Throwaway {
		// Durability is pointless for a cluster deleted on Stop.
		b.WriteString("fsync = off\nsynchronous_commit = off\nfull_page_writes = off\n")
	}
	path := filepath.Join(c.RealDir, confName)
	if err := os.WriteFile(path, []byte(b.String()), 0o600); err != nil {
		return err
	}
	if err := c.acct.own(path); err != nil {
		return err
	}

	main := filepath.Join(c.RealDir, "postgresql.conf")
	raw, err := os.ReadFile(main)
	if err != nil {
		return err
	}
	if bytes.Contains(raw, []byte(includeLine)) {
		return nil
	}
	f, err := os.OpenFile(main, os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		return err
	}
	_, err = fmt.Fprintf(f, "\n# Settings owned by beamledger's pgcluster (port, sockets, durability).\n%s\n", includeLine)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return err
}

// confQuote quotes a postgresql.conf string value.
func confQuote(s string) string { return "'" + strings.ReplaceAll(s, "'", "''") + "'" }

// takeOverPrevious deals with a postmaster.pid left in RealDir. A live server
// of this directory is adopted when it is ready and serves the wanted port
// (so a crashed dev run does not cost a restart), and stopped otherwise. A
// file naming a dead process, or one that is not this directory's server
// (PIDs are reused, especially in containers), is removed so it cannot block
// the start.
func (c *Cluster) takeOverPrevious(ctx context.Context, wantPort int) (adopted bool, err error) {
	info, err := readPidFile(c.RealDir)
	if err != nil || info == nil {
		return false, err
	}
	if !processAlive(info.pid) || !c.isOurPostmaster(info.pid) {
		fmt.Fprintf(c.log, "pgcluster: removing stale postmaster.pid (pid %d is not running this cluster)\n", info.pid)
		return false, os.Remove(filepath.Join(c.RealDir, "postmaster.pid"))
	}
	if info.ready && info.listen == "127.0.0.1" && (wantPort == 0 || wantPort == info.port) &&
		waitAccepting(ctx, info.port) == nil {
		fmt.Fprintf(c.log, "pgcluster: reusing the server already running on 127.0.0.1:%d (pid %d)\n", info.port, info.pid)
		c.pid, c.Port, c.SocketDir = info.pid, info.port, info.socketDir
		logPath := filepath.Join(c.RealDir, serverLogName)
		var size int64
		if fi, err := os.Stat(logPath); err == nil {
			size = fi.Size()
		}
		c.follow = followLog(logPath, size, c.log)
		return true, nil
	}
	fmt.Fprintf(c.log, "pgcluster: stopping the server left running on port %d (pid %d)\n", info.port, info.pid)
	return false, c.pgCtlStop(ctx, info.pid)
}

// isOurPostmaster reports whether pid is the server of RealDir. The
// postmaster's working directory is its data directory, which identifies it
// exactly; when that cannot be read, the command name has to do.
func (c *Cluster) isOurPostmaster(pid int) bool {
	cwd, err := os.Readlink(fmt.Sprintf("/proc/%d/cwd", pid))
	if err == nil {
		real, err := filepath.EvalSymlinks(c.RealDir)
		return err == nil && cwd == real
	}
	comm, err := os.ReadFile(fmt.Sprintf("/proc/%d/comm", pid))
	return err == nil && strings.TrimSpace(string(comm)) == "postgres"
}

// stopServer stops the server this Cluster started, and only that one: if
// another Start has since taken the directory over, its server is left alone.
func (c *Cluster) stopServer(ctx context.Context) error {
	if c.pid == 0 {
		return nil
	}
	info, _ := readPidFile(c.RealDir)
	if info == nil || info.pid != c.pid || !processAlive(c.pid) {
		return nil
	}
	fmt.Fprintf(c.log, "pgcluster: stopping the server on 127.0.0.1:%d\n", c.Port)
	return c.pgCtlStop(ctx, c.pid)
}

// pgCtlStop runs a fast shutdown and waits for it; if that fails it falls
// back to an immediate shutdown, so that no server outlives its caller.
func (c *Cluster) pgCtlStop(ctx context.Context, pid int) error {
	out := newTailBuffer(8 << 10)
	cmd := c.acct.command(ctx, c.RealDir, c.Binaries.Path("pg_ctl"),
		"stop", "-D", c.RealDir, "-m", "fast", "-w", "-t", "120", "-s")
	cmd.Stdout = io.MultiWriter(c.log, out)
	cmd.Stderr = cmd.Stdout
	err := cmd.Run()
	if err == nil || !processAlive(pid) {
		return nil
	}
	_ = syscall.Kill(pid, syscall.SIGQUIT)
	for range 100 {
		if !processAlive(pid) {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	return fmt.Errorf("pgcluster: pg_ctl stop in %s: %w (sent an immediate shutdown instead)\n%s", c.RealDir, err, out.lastLines(5))
}

// pidFile is what a postmaster.pid says (format since PostgreSQL 10).
type pidFile struct {
	pid       int
	port      int
	socketDir string
	listen    string
	ready     bool
}

// readPidFile reads dir/postmaster.pid; nil and no error when there is none.
func readPidFile(dir string) (*pidFile, error) {
	raw, err := os.ReadFile(filepath.Join(dir, "postmaster.pid"))
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	lines := strings.Split(string(raw), "\n")
	line := func(i int) string {
		if i < len(lines) {
			return strings.TrimSpace(lines[i])
		}
		return ""
	}
	pid, err := strconv.Atoi(line(0))
	if err != nil || pid <= 0 {
		// A half-written file from a crash names no process at all.
		return &pidFile{pid: 0}, nil
	}
	port, _ := strconv.Atoi(line(3))
	return &pidFile{
		pid: pid, port: port, socketDir: line(4), listen: line(5),
		ready: line(7) == "ready",
	}, nil
}

// processAlive reports whether pid runs. A zombie counts as dead: the
// postmaster is orphaned by pg_ctl, and an init that does not reap would
// otherwise make a stopped server look alive forever.
func processAlive(pid int) bool {
	if pid <= 0 {
		return false
	}
	if err := syscall.Kill(pid, 0); err != nil && !errors.Is(err, syscall.EPERM) {
		return false
	}
	stat, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return !errors.Is(err, fs.ErrNotExist)
	}
	// The state follows the parenthesised command name, which may itself
	// contain spaces and parentheses.
	if i := bytes.LastIndexByte(stat, ')'); i >= 0 && i+2 < len(stat) {
		return stat[i+2] != 'Z' && stat[i+2] != 'X'
	}
	return true
}

// Crash stops the server with an immediate shutdown, as a crash of the database
// host would: sessions are cut without a goodbye and the next start replays the
// WAL. For fault tests; Restart brings the server back on the same port.
func (c *Cluster) Crash(ctx context.Context) error {
	if c.pid == 0 || !processAlive(c.pid) {
		return errors.New("pgcluster: the server is not running")
	}
	out := newTailBuffer(8 << 10)
	cmd := c.acct.command(ctx, c.RealDir, c.Binaries.Path("pg_ctl"), "stop", "-D", c.RealDir, "-m", "immediate", "-w", "-s")
	cmd.Stdout = io.MultiWriter(c.log, out)
	cmd.Stderr = cmd.Stdout
	if err := cmd.Run(); err != nil {
		return fmt.Errorf("pgcluster: pg_ctl stop -m immediate: %w\n%s", err, out.lastLines(5))
	}
	for range 200 {
		if !processAlive(c.pid) {
			return nil
		}
		time.Sleep(25 * time.Millisecond)
	}
	return errors.New("pgcluster: the server outlived an immediate shutdown")
}

// Restart starts a stopped server again on its port and waits until it accepts
// connections (after recovery, when it crashed).
func (c *Cluster) Restart(ctx context.Context) error {
	return c.start(ctx, c.Port)
}

// mallocTunables keep a server process's freed memory for its next allocation
// instead of handing it back to the kernel at once. A statement's ledger event is
// a value of a hundred kilobytes or more: PostgreSQL builds each row it inserts
// in one allocation of that size and frees it after, and with glibc's defaults
// (memory past 128 KiB at the top of the heap is trimmed, and blocks from 128 KiB
// are mapped afresh) every such row faulted its pages in again. Measured on the
// cost-recovery benchmark's 300 events of 127 KB, the COPY took 225–250 ms with
// the defaults and 85–120 ms with these. The price is that a server process may
// hold up to 64 MiB it no longer uses, on top of its peak. The server is linked
// against glibc on every system this package supports; elsewhere the variable is
// ignored.
const mallocTunables = "glibc.malloc.trim_threshold=67108864:glibc.malloc.mmap_threshold=4194304"

// withMallocTunables adds mallocTunables to env's GLIBC_TUNABLES, unless the caller
// already sets either of those two tunables, whose choice stands.
func withMallocTunables(env []string) []string {
	for i, kv := range env {
		v, ok := strings.CutPrefix(kv, "GLIBC_TUNABLES=")
		switch {
		case !ok:
			continue
		case v == "":
			env[i] = "GLIBC_TUNABLES=" + mallocTunables
		case !strings.Contains(v, "glibc.malloc.trim_threshold") && !strings.Contains(v, "glibc.malloc.mmap_threshold"):
			env[i] = kv + ":" + mallocTunables
		}
		return env
	}
	return append(env, "GLIBC_TUNABLES="+mallocTunables)
}
