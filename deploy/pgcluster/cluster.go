package pgcluster

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/url"
	"os"
	"strconv"
	"strings"
	"sync"
	"time"
)

// DefaultUser is the superuser initdb creates when Options.User is empty.
const DefaultUser = "beamledger"

// Options describe the cluster to start.
type Options struct {
	// DataDir is where the cluster lives, created if missing. It must be
	// empty for a throwaway cluster, which always gets a fresh directory.
	DataDir string
	// Port is the TCP port on 127.0.0.1; 0 picks a free one at every start.
	Port int
	// User is the superuser initdb creates; DefaultUser when empty. Like
	// Password it only matters when the cluster is first created.
	User string
	// Password empty means trust authentication (anyone on the machine may
	// connect, acceptable only for throwaway test clusters); otherwise
	// scram-sha-256 with this password, for local and TCP connections.
	Password string
	// Throwaway clusters live in a fresh temp directory that Stop removes,
	// and run with fsync, synchronous_commit and full_page_writes off: a
	// crash loses them anyway, and tests run several times faster.
	Throwaway bool
	// Binaries to run; the zero value means FindBinaries.
	Binaries Binaries
	// Log receives progress lines and the server's log; nil discards them.
	Log io.Writer
}

// Cluster is a running private PostgreSQL server.
type Cluster struct {
	// DataDir is the directory asked for in Options (made absolute); for a
	// throwaway cluster it equals RealDir.
	DataDir string
	// RealDir is where the data files really are: DataDir itself, or the
	// target of the link at DataDir when the postgres user cannot reach it.
	RealDir string
	// SocketDir holds the server's Unix socket, "" when the path would be
	// too long for one; URL always uses TCP.
	SocketDir string
	// Port is the TCP port the server listens on at 127.0.0.1.
	Port int
	// User and Password are the credentials URL puts in connection URLs.
	User, Password string
	// Throwaway is copied from Options.
	Throwaway bool
	// Binaries is the installation the server runs from.
	Binaries Binaries

	acct     account
	log      io.Writer
	tempBase string
	pid      int // the postmaster this Cluster started or adopted
	follow   *logFollower
	// primary and slot are set on a replica (StartReplica): the cluster it
	// streams from and its replication slot there, dropped by Stop.
	primary *Cluster
	slot    string

	stopOnce sync.Once
	stopErr  error
}

// Start creates the cluster if its directory holds none, then starts the
// server on 127.0.0.1 and returns once it accepts connections. A server that
// an earlier, crashed run left holding the directory is reused when it serves
// the requested port, and stopped otherwise; a stale postmaster.pid naming a
// dead process is removed. The caller must call Stop.
func Start(ctx context.Context, opts Options) (*Cluster, error) {
	if opts.Throwaway != (opts.DataDir == "") {
		return nil, errors.New("pgcluster: set DataDir for a lasting cluster, and leave it empty for a throwaway one")
	}
	if strings.ContainsAny(opts.Password, "\n\r\x00") {
		return nil, errors.New("pgcluster: the password must be a single line")
	}
	if opts.User == "" {
		opts.User = DefaultUser
	}
	log := opts.Log
	if log == nil {
		log = io.Discard
	}
	log = &lockedWriter{w: log}

	bins := opts.Binaries
	if bins.Dir == "" {
		var err error
		if bins, err = FindBinaries(); err != nil {
			return nil, err
		}
	}
	acct, err := serverAccount()
	if err != nil {
		return nil, err
	}
	pl, err := place(opts, acct, log)
	if err != nil {
		return nil, fmt.Errorf("pgcluster: preparing %s: %w", opts.DataDir, err)
	}
	c := &Cluster{
		DataDir: pl.dataDir, RealDir: pl.realDir,
		User: opts.User, Password: opts.Password,
		Throwaway: opts.Throwaway, Binaries: bins,
		acct: acct, log: log, tempBase: pl.tempBase,
	}
	if err := c.start(ctx, opts.Port); err != nil {
		if stopErr := c.Stop(); stopErr != nil {
			err = errors.Join(err, stopErr)
		}
		return nil, err
	}
	return c, nil
}

// start initialises the cluster when needed and brings the server up.
func (c *Cluster) start(ctx context.Context, port int) error {
	if err := c.initIfNeeded(ctx); err != nil {
		return err
	}
	adopted, err := c.takeOverPrevious(ctx, port)
	if err != nil || adopted {
		return err
	}
	const attempts = 3
	for attempt := 1; ; attempt++ {
		p := port
		if p == 0 {
			if p, err = freePort(); err != nil {
				return err
			}
		}
		err = c.startServer(ctx, p)
		// A free port can be taken between our probe and the server's
		// bind; only then is another port worth a try.
		if err == nil || port != 0 || attempt == attempts || !errors.Is(err, errPortTaken) {
			break
		}
		fmt.Fprintf(c.log, "pgcluster: port %d was taken meanwhile; trying another\n", p)
	}
	if err != nil {
		return err
	}
	return waitAccepting(ctx, c.Port)
}

// freePort asks the kernel for a port that is free right now.
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, fmt.Errorf("pgcluster: finding a free port: %w", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}

// waitAccepting dials until the server takes TCP connections; pg_ctl -w has
// already waited for "ready", so this normally succeeds at once and is a
// check that the port is the one we think.
func waitAccepting(ctx context.Context, port int) error {
	ctx, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	addr := net.JoinHostPort("127.0.0.1", strconv.Itoa(port))
	var d net.Dialer
	for {
		conn, err := d.DialContext(ctx, "tcp", addr)
		if err == nil {
			return conn.Close()
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("pgcluster: server does not accept connections on %s: %w", addr, err)
		case <-time.After(50 * time.Millisecond):
		}
	}
}

// URL returns a postgres:// URL for dbname on this cluster, over TCP without
// TLS (the server listens on 127.0.0.1 only).
func (c *Cluster) URL(dbname string) string {
	return connURL(c.User, c.Password, c.Port, dbname)
}

func connURL(user, password string, port int, dbname string) string {
	u := url.URL{
		Scheme:   "postgres",
		User:     url.User(user),
		Host:     net.JoinHostPort("127.0.0.1", strconv.Itoa(port)),
		Path:     "/" + dbname,
		RawQuery: "sslmode=disable",
	}
	if password != "" {
		u.User = url.UserPassword(user, password)
	}
	return u.String()
}

// Stop shuts the server down with a fast shutdown (open sessions are ended,
// committed data kept) and, for a throwaway cluster, removes its files. It is
// safe to call more than once; later calls return the first call's result.
func (c *Cluster) Stop() error {
	c.stopOnce.Do(func() { c.stopErr = c.stop() })
	return c.stopErr
}

func (c *Cluster) stop() error {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	var errs []error
	if err := c.stopServer(ctx); err != nil {
		errs = append(errs, err)
	}
	if err := c.dropSlot(ctx); err != nil {
		errs = append(errs, err)
	}
	c.follow.close()
	if c.Throwaway && c.tempBase != "" {
		if err := os.RemoveAll(c.tempBase); err != nil {
			errs = append(errs, fmt.Errorf("pgcluster: removing %s: %w", c.tempBase, err))
		}
	}
	return errors.Join(errs...)
}
