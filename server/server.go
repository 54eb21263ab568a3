package server

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"sync/atomic"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger/accounts"
	"beamledger/metrics"
	"beamledger/provenance"
	"beamledger/storage/objects"
	"beamledger/storage/postgres"
	"beamledger/web"
)

// Server is the HTTP API and web interface over one database.
type Server struct {
	cfg    Config
	store  *postgres.DB
	log    *slog.Logger
	echo   *echo.Echo
	hasher *accounts.PasswordHasher
	tokens *tokenSigner
	auth   *authCache
	pages  *web.Pages
	// openapi is the API description as JSON, converted once at start.
	openapi []byte
	now     func() time.Time
	// objects keeps data files' bytes.
	objects objects.Store
	// rules records the access rule of every registered route, for the route matrix.
	rules map[string]rule
	// uploads sizes resumable uploads' segments and parts; the zero value is the
	// production sizing, and tests shrink it to reach many parts with little data.
	uploads uploadGeometry
	// ledger signs checkpoints; nil when the configuration has no ledger key.
	ledger *provenance.CheckpointSigner
	// published is the largest tree size whose checkpoint this process has seen in
	// the object store (LedgerCheckpointRetention).
	published atomic.Int64
	// metrics counts requests, uploads and background jobs, and reads the pool and
	// the ledger when scraped.
	metrics *metrics.Registry
	// replica is the pool on the read replica (Config.DatabaseReplicaURL) that the
	// read-only reports read; nil without one. New opens it and Close closes it.
	replica *postgres.DB
}

// New builds a server. now is the clock (time.Now outside tests).
func New(cfg Config, store *postgres.DB, log *slog.Logger, now func() time.Time) (*Server, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	s := &Server{
		cfg:    cfg,
		store:  store,
		log:    slog.New(requestIDLogHandler{log.Handler()}),
		hasher: accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), cfg.HashConcurrency),
		tokens: newTokenSigner(cfg, now),
		auth:   newAuthCache(cfg.AuthCacheTTL),
		now:    now,
		rules:  map[string]rule{},
	}
	s.metrics = s.newMetrics()
	var err error
	if s.ledger, err = newLedgerSigner(cfg); err != nil {
		return nil, err
	}
	if s.objects, err = openObjects(cfg); err != nil {
		return nil, err
	}
	pages, err := web.NewPages()
	if err != nil {
		return nil, err
	}
	s.pages = pages
	if s.openapi, err = openapiJSON(); err != nil {
		return nil, err
	}
	e := echo.New()
	e.HideBanner, e.HidePort = true, true
	e.HTTPErrorHandler = s.handleError
	if cfg.TrustProxyHeaders {
		e.IPExtractor = echo.ExtractIPFromXFFHeader()
	} else {
		e.IPExtractor = echo.ExtractIPDirect()
	}
	e.Use(withRequestID, s.countRequests, s.logRequests, s.recoverPanics, securityHeaders, limitBody(cfg.MaxBodyBytes, map[string]int64{
		// Data files stream to the object store; JSON bodies stay small.
		http.MethodPost + " /api/v1/files":               cfg.MaxFileBytes,
		http.MethodPatch + " /api/v1/uploads/:upload_id": cfg.MaxFileBytes,
		// A trace by bytes hashes the body as it streams and keeps none of it.
		http.MethodPost + " /api/v1/trace": cfg.MaxFileBytes,
	}))
	s.echo = e
	if err := s.routes(); err != nil {
		return nil, err
	}
	if cfg.DatabaseReplicaURL != "" {
		// Last, so that no earlier failure leaves the pool open.
		if s.replica, err = postgres.OpenReplica(context.Background(), cfg.DatabaseReplicaURL, 0); err != nil {
			return nil, fmt.Errorf("BEAMLEDGER_DATABASE_REPLICA_URL: %w", err)
		}
	}
	return s, nil
}

// Handler returns the server's HTTP handler (for tests and embedding).
func (s *Server) Handler() http.Handler { return s.echo }

// Close releases what New opened: the read replica's pool. The primary's pool
// belongs to the caller of New.
func (s *Server) Close() {
	if s.replica != nil {
		s.replica.Close()
	}
}

// reports is the database the read-only report routes read: the read replica when
// one is configured, else the primary. Only reads that may trail the primary by the
// replica's lag belong there (reports over periods, never a record the caller may
// just have written); a replica that is down makes them fail as unreachable (503).
func (s *Server) reports() *postgres.DB {
	if s.replica != nil {
		return s.replica
	}
	return s.store
}

// Serve answers on ln until ctx ends, then drains in-flight requests for up to the
// shutdown timeout.
func (s *Server) Serve(ctx context.Context, ln net.Listener) error {
	hs := &http.Server{
		Handler:           s.echo,
		ReadHeaderTimeout: s.cfg.ReadHeaderTimeout,
		ReadTimeout:       s.cfg.ReadTimeout,
		WriteTimeout:      s.cfg.WriteTimeout,
		IdleTimeout:       s.cfg.IdleTimeout,
		MaxHeaderBytes:    64 << 10,
		ErrorLog:          slog.NewLogLogger(s.log.Handler(), slog.LevelWarn),
		BaseContext:       func(net.Listener) context.Context { return context.WithoutCancel(ctx) },
	}
	errc := make(chan error, 1)
	go func() { errc <- hs.Serve(ln) }()
	go s.markNoShows(ctx, s.cfg.JobInterval)
	go s.cleanupEvery(ctx)
	go s.sealLedgerEvery(ctx)
	select {
	case err := <-errc:
		return err
	case <-ctx.Done():
	}
	s.log.Info("shutting down: draining in-flight requests", slog.Duration("timeout", s.cfg.ShutdownTimeout))
	sctx, cancel := context.WithTimeout(context.Background(), s.cfg.ShutdownTimeout)
	defer cancel()
	if err := hs.Shutdown(sctx); err != nil {
		return fmt.Errorf("shutdown: %w", err)
	}
	if err := <-errc; err != nil && !errors.Is(err, http.ErrServerClosed) {
		return err
	}
	return nil
}

// Run checks the schema, listens on the configured address and serves until ctx ends.
// It refuses to start without a ledger key, as Validate does without a JWT key:
// tests build servers with New and may go without checkpoints, a deployment may not.
func Run(ctx context.Context, cfg Config, store *postgres.DB, log *slog.Logger, ready func(addr string)) error {
	if len(cfg.LedgerKey) == 0 {
		return errNoLedgerKey
	}
	st, err := store.Schema(ctx)
	if err != nil {
		return err
	}
	if st.TooNew() {
		return fmt.Errorf("database schema is at version %d but this binary knows only up to %d: run a newer beamledger", st.Current, st.Known)
	}
	if !st.UpToDate() {
		return fmt.Errorf("database schema is at version %d, this binary needs %d: run `beamledger migrate up`", st.Current, st.Known)
	}
	s, err := New(cfg, store, log, time.Now)
	if err != nil {
		return err
	}
	defer s.Close()
	ln, err := net.Listen("tcp", cfg.ListenAddr)
	if err != nil {
		return err
	}
	if err := s.listenMetrics(ctx); err != nil {
		ln.Close()
		return err
	}
	log.Info("listening", slog.String("addr", ln.Addr().String()))
	if ready != nil {
		ready(ln.Addr().String())
	}
	return s.Serve(ctx, ln)
}

// markNoShows records no-shows and lapses expired waitlist offers every interval until
// ctx ends. Several processes may run it at once: storage skips rows another process
// is working on.
func (s *Server) markNoShows(ctx context.Context, every time.Duration) {
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			start := time.Now()
			ids, err := s.store.MarkNoShows(ctx, s.now())
			s.jobDone(ctx, jobNoShows, start, err)
			if err != nil && ctx.Err() == nil {
				s.log.Warn("marking no-shows failed", slog.Any("error", err))
			} else if len(ids) > 0 {
				s.log.Info("no-shows marked", slog.Int("bookings", len(ids)))
			}
			start = time.Now()
			lapsed, err := s.store.LapseOffers(ctx, s.now())
			s.jobDone(ctx, jobWaitlistOffers, start, err)
			if err != nil && ctx.Err() == nil {
				s.log.Warn("lapsing waitlist offers failed", slog.Any("error", err))
			} else if len(lapsed) > 0 {
				s.log.Info("waitlist offers lapsed", slog.Int("entries", len(lapsed)))
			}
		}
	}
}

// openObjects opens the configured object store. Nothing is contacted yet: an S3
// bucket is checked (and created, when allowed) on first use.
func openObjects(cfg Config) (objects.Store, error) {
	if cfg.ObjectStore == "s3" {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		return objects.NewS3(ctx, objects.S3Config{Endpoint: cfg.S3.Endpoint, Region: cfg.S3.Region, Bucket: cfg.S3.Bucket,
			AccessKey: cfg.S3.AccessKey, SecretKey: cfg.S3.SecretKey, UseTLS: cfg.S3.UseTLS, PathStyle: cfg.S3.PathStyle,
			SignPayload: cfg.S3.SignPayload, CreateBucket: cfg.S3.CreateBucket, ObjectLock: cfg.S3.ObjectLock})
	}
	return objects.NewDisk(cfg.ObjectDir)
}
