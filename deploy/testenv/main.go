// Command testenv runs a command beside the services the test suites need,
// so that `make test` works on a bare machine with no setup and leaves
// nothing running behind it.
//
// Usage:
//
//	go run ./deploy/testenv [-v] -- CMD ARGS...
//
// It starts a throwaway PostgreSQL cluster on a free 127.0.0.1 port (installing
// the server with apt-get first when it is missing and testenv runs as root)
// and a throwaway S3-compatible server (versitygw, built with `go install`
// into .cache/bin on first use, which takes a few minutes), finds the headless
// Chromium the web tests drive (installing Debian's chromium package when it is
// missing and testenv runs as root; BEAMLEDGER_TEST_CHROMIUM names it), runs CMD with
// BEAMLEDGER_TEST_DATABASE_URL and BEAMLEDGER_TEST_S3_ENDPOINT,
// BEAMLEDGER_TEST_S3_ACCESS_KEY, BEAMLEDGER_TEST_S3_SECRET_KEY and
// BEAMLEDGER_TEST_S3_REGION pointing at them, stops both whatever happens,
// and exits with CMD's exit status. When BEAMLEDGER_TEST_DATABASE_URL, or
// BEAMLEDGER_TEST_S3_ENDPOINT, is already set, that service is used as is,
// which lets CI provide its own. SIGINT and SIGTERM are passed on to CMD, so
// an interrupted test run still tears the services down.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"os/signal"
	"strings"
	"sync"
	"syscall"

	"beamledger/deploy/chromium"
	"beamledger/deploy/pgcluster"
	"beamledger/deploy/s3server"
)

// envDatabaseURL is the variable the storage and HTTP tests read.
const envDatabaseURL = "BEAMLEDGER_TEST_DATABASE_URL"

// The variables the object store tests read. Tests make their own buckets,
// so none is named here.
const (
	envS3Endpoint  = "BEAMLEDGER_TEST_S3_ENDPOINT"
	envS3AccessKey = "BEAMLEDGER_TEST_S3_ACCESS_KEY"
	envS3SecretKey = "BEAMLEDGER_TEST_S3_SECRET_KEY"
	envS3Region    = "BEAMLEDGER_TEST_S3_REGION"
)

// service is one thing the tests need running. Services start in list
// order and stop in reverse, so a later one may depend on an earlier one
// (an S3 server and a browser are expected to join PostgreSQL here).
type service interface {
	// Name is what messages call the service.
	Name() string
	// Start brings the service up and returns the NAME=value pairs that
	// tell the command where it is. A failed Start leaves nothing running.
	Start(ctx context.Context) (env []string, err error)
	// Stop shuts the service down and removes what it created.
	Stop() error
}

func main() { os.Exit(run()) }

func run() int {
	verbose := flag.Bool("v", false, "copy the services' own logs to stderr")
	flag.Usage = func() {
		fmt.Fprintf(flag.CommandLine.Output(), "usage: go run ./deploy/testenv [-v] -- CMD ARGS...\n")
		flag.PrintDefaults()
	}
	flag.Parse()
	if flag.NArg() == 0 {
		flag.Usage()
		return 2
	}
	logs := io.Discard
	if *verbose {
		logs = os.Stderr
	}

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	relay := newSignalRelay(cancel)
	defer relay.close()

	started, env, err := startAll(ctx, plannedServices(logs))
	defer func() {
		if err := stopAll(started); err != nil {
			fmt.Fprintf(os.Stderr, "testenv: %v\n", err)
		}
	}()
	if err != nil {
		fmt.Fprintf(os.Stderr, "testenv: %v\n", err)
		return 1
	}

	code, err := runChild(relay, flag.Args(), env)
	if err != nil {
		fmt.Fprintf(os.Stderr, "testenv: %v\n", err)
	}
	return code
}

// plannedServices lists what to start, in order.
func plannedServices(logs io.Writer) []service {
	var services []service
	if url := os.Getenv(envDatabaseURL); url != "" {
		fmt.Fprintf(os.Stderr, "testenv: using the database in %s from the environment\n", envDatabaseURL)
	} else {
		services = append(services, &postgresService{log: logs})
	}
	if endpoint := os.Getenv(envS3Endpoint); endpoint != "" {
		fmt.Fprintf(os.Stderr, "testenv: using the S3 server in %s from the environment\n", envS3Endpoint)
	} else {
		services = append(services, &s3Service{log: logs})
	}
	if path := os.Getenv(envChromium); path != "" {
		fmt.Fprintf(os.Stderr, "testenv: using the browser in %s from the environment\n", envChromium)
	} else {
		services = append(services, &chromiumService{})
	}
	return services
}

// startAll starts services in order; on failure it stops the ones already
// started and returns none.
func startAll(ctx context.Context, services []service) ([]service, []string, error) {
	var started []service
	var env []string
	for _, s := range services {
		kv, err := s.Start(ctx)
		if err != nil {
			err = fmt.Errorf("starting %s: %w", s.Name(), err)
			return nil, nil, errors.Join(err, stopAll(started))
		}
		started = append(started, s)
		env = append(env, kv...)
	}
	return started, env, nil
}

// stopAll stops services in reverse order, trying every one.
func stopAll(services []service) error {
	var errs []error
	for i := len(services) - 1; i >= 0; i-- {
		if err := services[i].Stop(); err != nil {
			errs = append(errs, fmt.Errorf("stopping %s: %w", services[i].Name(), err))
		}
	}
	return errors.Join(errs...)
}

// runChild runs the command with the services' environment and returns the
// exit status to pass on: the command's own, 128+N when signal N killed it
// (as shells report), 1 when it could not be started.
func runChild(relay *signalRelay, args, env []string) (int, error) {
	cmd := exec.Command(args[0], args[1:]...)
	cmd.Env = append(os.Environ(), env...)
	cmd.Stdin, cmd.Stdout, cmd.Stderr = os.Stdin, os.Stdout, os.Stderr
	if err := relay.start(cmd); err != nil {
		return 1, err
	}
	err := cmd.Wait()
	if ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus); ok && ws.Signaled() {
		return 128 + int(ws.Signal()), nil
	}
	var exitErr *exec.ExitError
	if err != nil && !errors.As(err, &exitErr) {
		return 1, err
	}
	return cmd.ProcessState.ExitCode(), nil
}

// signalRelay passes SIGINT and SIGTERM to the child once it runs; before
// that, a signal cancels the services' start-up instead, so that nothing is
// left half-started.
type signalRelay struct {
	mu          sync.Mutex
	child       *os.Process
	interrupted bool
	signals     chan os.Signal
	done        chan struct{}
}

func newSignalRelay(cancel context.CancelFunc) *signalRelay {
	r := &signalRelay{signals: make(chan os.Signal, 4), done: make(chan struct{})}
	signal.Notify(r.signals, os.Interrupt, syscall.SIGTERM)
	go func() {
		defer close(r.done)
		for sig := range r.signals {
			r.mu.Lock()
			if r.child != nil {
				_ = r.child.Signal(sig) // it may have exited already
			} else {
				r.interrupted = true
				cancel()
			}
			r.mu.Unlock()
		}
	}()
	return r
}

// start starts cmd unless a signal came first.
func (r *signalRelay) start(cmd *exec.Cmd) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.interrupted {
		return errors.New("interrupted before the command started")
	}
	if err := cmd.Start(); err != nil {
		return err
	}
	r.child = cmd.Process
	return nil
}

func (r *signalRelay) close() {
	signal.Stop(r.signals)
	close(r.signals)
	<-r.done
}

// postgresService is a throwaway PostgreSQL cluster with trust
// authentication on 127.0.0.1, which is as much security as tests need.
type postgresService struct {
	log     io.Writer
	cluster *pgcluster.Cluster
}

func (p *postgresService) Name() string { return "PostgreSQL" }

func (p *postgresService) Start(ctx context.Context) ([]string, error) {
	bins, err := pgcluster.EnsureBinaries(ctx, os.Stderr)
	if err != nil {
		return nil, err
	}
	c, err := pgcluster.Start(ctx, pgcluster.Options{Throwaway: true, Binaries: bins, Log: p.log})
	if err != nil {
		return nil, err
	}
	p.cluster = c
	fmt.Fprintf(os.Stderr, "testenv: PostgreSQL %d on 127.0.0.1:%d (data in %s, removed on exit)\n",
		bins.Version, c.Port, c.RealDir)
	return []string{envDatabaseURL + "=" + c.URL("postgres")}, nil
}

func (p *postgresService) Stop() error {
	if p.cluster == nil {
		return nil
	}
	return p.cluster.Stop()
}

// s3Service is a throwaway versitygw on 127.0.0.1 with generated keys.
type s3Service struct {
	log    io.Writer
	server *s3server.Server
}

func (s *s3Service) Name() string { return "S3 server" }

func (s *s3Service) Start(ctx context.Context) ([]string, error) {
	// Build progress goes to stderr like the PostgreSQL install's: the first
	// build takes minutes and should not look like a hang.
	bin, err := s3server.EnsureBinary(ctx, "", os.Stderr)
	if err != nil {
		return nil, err
	}
	srv, err := s3server.Start(ctx, s3server.Options{Binary: bin, Log: s.log})
	if err != nil {
		return nil, err
	}
	s.server = srv
	fmt.Fprintf(os.Stderr, "testenv: versitygw %s on %s (data in %s, removed on exit)\n",
		s3server.Version, srv.Endpoint, srv.Dir)
	return []string{
		envS3Endpoint + "=" + srv.Endpoint,
		envS3AccessKey + "=" + srv.AccessKey,
		envS3SecretKey + "=" + srv.SecretKey,
		envS3Region + "=" + srv.Region,
	}, nil
}

func (s *s3Service) Stop() error {
	if s.server == nil {
		return nil
	}
	return s.server.Stop()
}

// envChromium names the headless browser the web tests drive; envChromiumMissing
// says why there is none, so that those tests fail with the reason instead of
// skipping.
const (
	envChromium        = "BEAMLEDGER_TEST_CHROMIUM"
	envChromiumMissing = "BEAMLEDGER_TEST_CHROMIUM_MISSING"
)

// chromiumService finds Debian's chromium, installing it with apt-get when root and
// missing. A browser that cannot be had does not stop the other suites: its reason
// is passed on, and only the browser tests fail.
type chromiumService struct{}

func (chromiumService) Name() string { return "Chromium" }

func (chromiumService) Start(ctx context.Context) ([]string, error) {
	path, err := chromium.Ensure(ctx, os.Stderr)
	if err != nil {
		fmt.Fprintf(os.Stderr, "testenv: no browser for the web tests: %v\n", err)
		return []string{envChromiumMissing + "=" + strings.ReplaceAll(err.Error(), "\n", " ")}, nil
	}
	fmt.Fprintf(os.Stderr, "testenv: browser %s\n", path)
	return []string{envChromium + "=" + path}, nil
}

func (chromiumService) Stop() error { return nil }
