package pgcluster

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/url"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// testBinaries installs the server once per test binary when it is missing
// and we are root, as a fresh CI machine would need.
var testBinaries = sync.OnceValues(func() (Binaries, error) {
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Minute)
	defer cancel()
	return EnsureBinaries(ctx, os.Stderr)
})

func needBinaries(t *testing.T) Binaries {
	t.Helper()
	b, err := testBinaries()
	if err != nil {
		if os.Geteuid() != 0 {
			t.Skipf("no usable PostgreSQL server and not root to install it: %v", err)
		}
		t.Fatal(err)
	}
	return b
}

// startCluster starts a cluster for the test and stops it when the test ends.
func startCluster(t *testing.T, opts Options) *Cluster {
	t.Helper()
	opts.Binaries = needBinaries(t)
	opts.Log = t.Output()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	began := time.Now()
	c, err := Start(ctx, opts)
	if err != nil {
		t.Fatalf("Start: %v", err)
	}
	t.Logf("started PostgreSQL %d on port %d in %v (data in %s)", c.Binaries.Version, c.Port, time.Since(began).Round(time.Millisecond), c.RealDir)
	t.Cleanup(func() {
		if err := c.Stop(); err != nil {
			t.Errorf("Stop: %v", err)
		}
	})
	return c
}

// psql runs sql against dbURL with the installation's psql, so this package
// stays free of a Go driver.
func psql(t *testing.T, dbURL, sql string) (string, error) {
	t.Helper()
	b := needBinaries(t)
	program := b.Path("psql")
	if _, err := os.Stat(program); err != nil {
		if program, err = exec.LookPath("psql"); err != nil {
			t.Skip("no psql client installed")
		}
	}
	cmd := exec.Command(program, "-X", "-q", "-At", "-v", "ON_ERROR_STOP=1", "-d", dbURL, "-c", sql)
	cmd.Env = append(serverEnv(os.Environ(), os.TempDir()), "PGCONNECT_TIMEOUT=10")
	out, err := cmd.CombinedOutput()
	return strings.TrimSpace(string(out)), err
}

func mustPSQL(t *testing.T, dbURL, sql string) string {
	t.Helper()
	out, err := psql(t, dbURL, sql)
	if err != nil {
		t.Fatalf("psql %q: %v\n%s", sql, err, out)
	}
	return out
}

// reachableTempDir returns a fresh directory every user can traverse, the
// way a checkout under /home or /work usually is.
func reachableTempDir(t *testing.T) string {
	t.Helper()
	dir, err := os.MkdirTemp("", "beamledger-pgtest-*")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.RemoveAll(dir) })
	if err := os.Chmod(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	return dir
}

func TestFindBinaries(t *testing.T) {
	b := needBinaries(t)
	if b.Version < 10 {
		t.Errorf("Version = %d, want a current major version", b.Version)
	}
	for _, name := range serverPrograms {
		if _, err := os.Stat(b.Path(name)); err != nil {
			t.Errorf("%s: %v", name, err)
		}
	}
	if !b.HasExtension("btree_gist") {
		t.Error("btree_gist is not installed after EnsureBinaries")
	}
	if b.HasExtension("no_such_extension") {
		t.Error("HasExtension reports an extension that does not exist")
	}
	found, err := FindBinaries()
	if err != nil || found != b {
		t.Errorf("FindBinaries = %+v, %v; want %+v", found, err, b)
	}
}

func TestModeAllowsSearch(t *testing.T) {
	const owner, group, other = 100, 200, 300
	tests := []struct {
		mode os.FileMode
		uid  uint32
		gids []uint32
		want bool
	}{
		{0o755, other, nil, true},
		{0o700, other, nil, false},
		{0o700, owner, nil, true},
		{0o750, other, []uint32{group}, true},
		{0o705, other, []uint32{group}, false}, // the group class applies, not other
		{0o055, owner, nil, false},             // the owner class applies, not other
		{0o700, 0, nil, true},
	}
	for _, tt := range tests {
		if got := modeAllowsSearch(tt.mode, owner, group, tt.uid, tt.gids); got != tt.want {
			t.Errorf("mode %o uid %d gids %v: got %v, want %v", tt.mode, tt.uid, tt.gids, got, tt.want)
		}
	}
}

func TestSearchable(t *testing.T) {
	const stranger = 4242 // owns nothing here
	open := reachableTempDir(t)
	closed := filepath.Join(open, "closed")
	inner := filepath.Join(closed, "inner")
	if err := os.MkdirAll(inner, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.Chmod(closed, 0o700); err != nil {
		t.Fatal(err)
	}
	for dir, want := range map[string]bool{open: true, closed: false, inner: false} {
		got, err := searchable(dir, stranger, nil)
		if err != nil || got != want {
			t.Errorf("searchable(%s) = %v, %v; want %v", dir, got, err, want)
		}
	}
}

func TestURL(t *testing.T) {
	got := connURL("bl", "p@ss:w/rd?&#% x", 5433, "lab data")
	u, err := url.Parse(got)
	if err != nil {
		t.Fatalf("%s: %v", got, err)
	}
	pw, _ := u.User.Password()
	if u.Scheme != "postgres" || u.User.Username() != "bl" || pw != "p@ss:w/rd?&#% x" ||
		u.Host != "127.0.0.1:5433" || u.Path != "/lab data" || u.Query().Get("sslmode") != "disable" {
		t.Errorf("URL %s does not round-trip: %+v", got, u)
	}
	if got := connURL("bl", "", 5433, "postgres"); got != "postgres://bl@127.0.0.1:5433/postgres?sslmode=disable" {
		t.Errorf("password-less URL = %s", got)
	}
}

func TestThrowawayCluster(t *testing.T) {
	t.Parallel()
	c := startCluster(t, Options{Throwaway: true})
	db := c.URL("postgres")

	if got := mustPSQL(t, db, "SELECT current_user || ' ' || current_setting('fsync')"); got != DefaultUser+" off" {
		t.Errorf("user and fsync = %q, want %q", got, DefaultUser+" off")
	}
	// The booking constraint the schema relies on: btree_gist lets an
	// integer take part in a GiST exclusion constraint beside a range.
	mustPSQL(t, db, `CREATE EXTENSION btree_gist;
		CREATE TABLE booking (instrument_id int, during tstzrange,
			EXCLUDE USING gist (instrument_id WITH =, during WITH &&));
		INSERT INTO booking VALUES (1, '[2025-01-01 09:00Z, 2025-01-01 10:00Z)'),
			(1, '[2025-01-01 10:00Z, 2025-01-01 11:00Z)'), (2, '[2025-01-01 09:30Z, 2025-01-01 10:30Z)')`)
	out, err := psql(t, db, `INSERT INTO booking VALUES (1, '[2025-01-01 09:30Z, 2025-01-01 09:45Z)')`)
	if err == nil || !strings.Contains(out, "conflicting key value violates exclusion constraint") {
		t.Errorf("overlapping booking: err %v, output %q; want an exclusion violation", err, out)
	}

	if os.Geteuid() == 0 {
		assertOwnedByPostgres(t, c.RealDir)
	}
	// The server runs with the allocator settings that spare it refaulting the
	// memory of every large row (see mallocTunables); its children inherit them.
	// (glibc, reading them at start, may leave NULs for the colons between them.)
	if environ, err := os.ReadFile("/proc/" + strconv.Itoa(c.pid) + "/environ"); err != nil {
		t.Errorf("server environment: %v", err)
	} else {
		for _, tunable := range strings.Split(mallocTunables, ":") {
			if !strings.Contains(string(environ), tunable) {
				t.Errorf("server environment lacks %s", tunable)
			}
		}
	}
	if c.SocketDir == "" {
		t.Error("no Unix socket for a short temp path")
	}

	if err := c.Stop(); err != nil {
		t.Fatalf("Stop: %v", err)
	}
	if err := c.Stop(); err != nil {
		t.Errorf("second Stop: %v", err)
	}
	if _, err := os.Stat(c.tempBase); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("throwaway directory %s still there after Stop: %v", c.tempBase, err)
	}
	if conn, err := net.DialTimeout("tcp", net.JoinHostPort("127.0.0.1", strconv.Itoa(c.Port)), time.Second); err == nil {
		conn.Close()
		t.Errorf("port %d still accepts connections after Stop", c.Port)
	}
}

func TestWithMallocTunables(t *testing.T) {
	for _, tc := range []struct {
		env  []string
		want string // GLIBC_TUNABLES after
	}{
		{[]string{"PATH=/bin"}, mallocTunables},
		{[]string{"GLIBC_TUNABLES="}, mallocTunables},
		{[]string{"GLIBC_TUNABLES=glibc.malloc.arena_max=2"}, "glibc.malloc.arena_max=2:" + mallocTunables},
		// An operator's own choice of either threshold stands as given.
		{[]string{"GLIBC_TUNABLES=glibc.malloc.trim_threshold=1024"}, "glibc.malloc.trim_threshold=1024"},
		{[]string{"GLIBC_TUNABLES=glibc.malloc.mmap_threshold=1024"}, "glibc.malloc.mmap_threshold=1024"},
	} {
		var got []string
		for _, kv := range withMallocTunables(slices.Clone(tc.env)) {
			if v, ok := strings.CutPrefix(kv, "GLIBC_TUNABLES="); ok {
				got = append(got, v)
			}
		}
		if len(got) != 1 || got[0] != tc.want {
			t.Errorf("withMallocTunables(%q): GLIBC_TUNABLES %q, want [%q]", tc.env, got, tc.want)
		}
	}
}

func TestPasswordAuth(t *testing.T) {
	t.Parallel()
	const password = "p@ss:w/rd?&#% x'"
	c := startCluster(t, Options{Throwaway: true, User: "facility", Password: password})

	if got := mustPSQL(t, c.URL("postgres"), "SELECT current_user"); got != "facility" {
		t.Errorf("current_user = %q", got)
	}
	for name, dbURL := range map[string]string{
		"wrong password": connURL("facility", "wrong", c.Port, "postgres"),
		"no password":    connURL("facility", "", c.Port, "postgres"),
	} {
		out, err := psql(t, dbURL, "SELECT 1")
		if err == nil {
			t.Errorf("%s: connected", name)
		} else if !strings.Contains(out, "password") {
			t.Errorf("%s: failed for another reason: %s", name, out)
		}
	}
}

func TestRestartReusesData(t *testing.T) {
	t.Parallel()
	dataDir := filepath.Join(reachableTempDir(t), ".data", "postgres")
	opts := Options{DataDir: dataDir, Password: "secret"}

	first := startCluster(t, opts)
	if first.RealDir != dataDir {
		t.Errorf("RealDir = %s, want the reachable DataDir %s itself", first.RealDir, dataDir)
	}
	if got := mustPSQL(t, first.URL("postgres"), "SHOW fsync"); got != "on" {
		t.Errorf("fsync = %s on a lasting cluster", got)
	}
	mustPSQL(t, first.URL("postgres"), "CREATE TABLE kept (v text); INSERT INTO kept VALUES ('survives')")
	if err := first.Stop(); err != nil {
		t.Fatal(err)
	}

	second := startCluster(t, opts)
	if got := mustPSQL(t, second.URL("postgres"), "SELECT v FROM kept"); got != "survives" {
		t.Errorf("after restart: %q", got)
	}

	// A run that crashed left its server running: the next Start adopts it
	// instead of failing on the lock file.
	third := startCluster(t, opts)
	if third.Port != second.Port || third.pid != second.pid {
		t.Errorf("third Start ran its own server (port %d pid %d) beside the running one (port %d pid %d)",
			third.Port, third.pid, second.Port, second.pid)
	}
	if err := third.Stop(); err != nil {
		t.Fatal(err)
	}
	if err := second.Stop(); err != nil {
		t.Errorf("Stop of the adopted server's first owner: %v", err)
	}

	// A postmaster.pid naming a live process that is not this cluster's
	// server (PIDs are reused after a crash) must not block the start.
	stale := fmt.Sprintf("%d\n%s\n0\n%d\n\n127.0.0.1\n0 0\nready   \n", os.Getpid(), second.RealDir, second.Port)
	pidPath := filepath.Join(second.RealDir, "postmaster.pid")
	if err := os.WriteFile(pidPath, []byte(stale), 0o600); err != nil {
		t.Fatal(err)
	}
	fourth := startCluster(t, opts)
	if got := mustPSQL(t, fourth.URL("postgres"), "SELECT v FROM kept"); got != "survives" {
		t.Errorf("after a stale postmaster.pid: %q", got)
	}
}

func TestUnreachableParent(t *testing.T) {
	t.Parallel()
	if os.Geteuid() != 0 {
		t.Skip("only root hands the cluster to another user")
	}
	parent, err := os.MkdirTemp("", "beamledger-private-*") // 0700, root's: like /root
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.RemoveAll(parent) })
	dataDir := filepath.Join(parent, "checkout", ".data", "postgres")
	opts := Options{DataDir: dataDir, Password: "secret"}

	first := startCluster(t, opts)
	t.Cleanup(func() { os.RemoveAll(first.RealDir) })
	want := filepath.Join(ClusterRoot, clusterName(dataDir))
	if first.RealDir != want || first.DataDir != dataDir {
		t.Errorf("DataDir, RealDir = %s, %s; want %s, %s", first.DataDir, first.RealDir, dataDir, want)
	}
	if target, err := os.Readlink(dataDir); err != nil || target != want {
		t.Errorf("DataDir link = %q, %v; want a link to %s", target, err, want)
	}
	assertOwnedByPostgres(t, first.RealDir)
	mustPSQL(t, first.URL("postgres"), "CREATE TABLE kept AS SELECT 'linked' AS v")
	if err := first.Stop(); err != nil {
		t.Fatal(err)
	}

	second := startCluster(t, opts)
	if second.RealDir != want {
		t.Errorf("second run RealDir = %s, want %s", second.RealDir, want)
	}
	if got := mustPSQL(t, second.URL("postgres"), "SELECT v FROM kept"); got != "linked" {
		t.Errorf("after restart through the link: %q", got)
	}
}

func TestStartFailureQuotesServerLog(t *testing.T) {
	t.Parallel()
	b := needBinaries(t)
	taken, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer taken.Close()
	port := taken.Addr().(*net.TCPAddr).Port

	c, err := Start(context.Background(), Options{Throwaway: true, Port: port, Binaries: b, Log: t.Output()})
	if err == nil {
		c.Stop()
		t.Fatal("Start succeeded on a port in use")
	}
	if !errors.Is(err, errPortTaken) || !strings.Contains(err.Error(), "could not bind") {
		t.Errorf("error does not quote the server log: %v", err)
	}
}

func assertOwnedByPostgres(t *testing.T, dir string) {
	t.Helper()
	u, err := user.Lookup(serverUserName)
	if err != nil {
		t.Fatal(err)
	}
	fi, err := os.Stat(dir)
	if err != nil {
		t.Fatal(err)
	}
	st := fi.Sys().(*syscall.Stat_t)
	if strconv.Itoa(int(st.Uid)) != u.Uid || fi.Mode().Perm() != 0o700 {
		t.Errorf("%s: uid %d mode %o; want %s's, 0700", dir, st.Uid, fi.Mode().Perm(), serverUserName)
	}
}

// TestDeletedLinkStartsAfresh: deleting the data directory (its link, when the cluster
// lives elsewhere) and starting again gives a fresh cluster with the new password, not
// the orphaned old one.
func TestDeletedLinkStartsAfresh(t *testing.T) {
	if os.Geteuid() != 0 {
		t.Skip("the link layout is used only when running as root")
	}
	ctx := context.Background()
	parent := t.TempDir() // 0700 and root's: unreachable by the server user
	dataDir := filepath.Join(parent, "pg")
	c, err := Start(ctx, Options{DataDir: dataDir, Password: "first-password-123"})
	if err != nil {
		t.Fatal(err)
	}
	real := c.RealDir
	t.Cleanup(func() { os.RemoveAll(real) })
	if err := c.Stop(); err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(dataDir); err != nil {
		t.Fatal(err)
	}
	c2, err := Start(ctx, Options{DataDir: dataDir, Password: "second-password-456"})
	if err != nil {
		t.Fatalf("second start after deleting the link: %v", err)
	}
	defer c2.Stop()
	out, err := exec.Command(filepath.Join(c2.Binaries.Dir, "psql"), c2.URL("postgres"), "-Atc", "SELECT 1").CombinedOutput()
	if err != nil || strings.TrimSpace(string(out)) != "1" {
		t.Fatalf("connect with the new password: %v %s", err, out)
	}
}
