package server

import (
	"context"
	"crypto/sha256"
	"crypto/subtle"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger/metrics"
	"beamledger/storage/postgres"
)

// Background jobs as the metrics name them.
const (
	jobLedgerSeal     = "ledger_seal"
	jobUploadCleanup  = "upload_cleanup"
	jobNoShows        = "no_shows"
	jobWaitlistOffers = "waitlist_offers"
)

// uploadRoutes are the routes whose request bodies are data-file bytes.
var uploadRoutes = map[string]bool{
	http.MethodPost + " /api/v1/files":               true,
	http.MethodPatch + " /api/v1/uploads/:upload_id": true,
}

// newMetrics makes the process's metrics, reading the pools and the ledger at each
// scrape. The replica's pool is reported when the configuration names a replica.
func (s *Server) newMetrics() *metrics.Registry {
	var replicaPool func() metrics.PoolStats
	if s.cfg.DatabaseReplicaURL != "" {
		replicaPool = func() metrics.PoolStats {
			if s.replica == nil {
				return metrics.PoolStats{}
			}
			return poolStats(s.replica.PoolStats())
		}
	}
	return metrics.New(metrics.Sources{
		Pool:        func() metrics.PoolStats { return poolStats(s.store.PoolStats()) },
		ReplicaPool: replicaPool,
		Ledger: func(ctx context.Context) (metrics.LedgerStats, error) {
			head, err := s.store.LedgerHead(ctx)
			if err != nil {
				return metrics.LedgerStats{}, err
			}
			n, oldest, err := s.store.UnsealedEvents(ctx)
			if err != nil {
				return metrics.LedgerStats{}, err
			}
			st := metrics.LedgerStats{Size: head.Size, Unsealed: n}
			if oldest != nil {
				st.OldestUnsealed = *oldest
			}
			return st, nil
		},
		Now: s.now,
	})
}

// poolStats converts storage's pool snapshot for the metrics.
func poolStats(p postgres.PoolStats) metrics.PoolStats {
	return metrics.PoolStats{Acquired: p.Acquired, Idle: p.Idle, Constructing: p.Constructing, Total: p.Total,
		Max: p.Max, Acquires: p.Acquires, EmptyAcquires: p.EmptyAcquires, CanceledAcquires: p.CanceledAcquires,
		AcquireWait: p.AcquireWait}
}

// countRequests records every answered request by route template and status; it
// runs outside logRequests, which writes error answers, so the status is final.
// Upload routes also record the body bytes read and the duration.
func (s *Server) countRequests(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		start := time.Now()
		req := c.Request()
		var body *countingReader
		if req.Body != nil && req.Body != http.NoBody {
			body = &countingReader{r: req.Body}
			req.Body = body
		}
		err := next(c)
		route := c.Path()
		if route == "" {
			route = "(none)"
		}
		d, status := time.Since(start), c.Response().Status
		s.metrics.Request(req.Method, route, status, d)
		if uploadRoutes[req.Method+" "+route] {
			var n int64
			if body != nil {
				n = body.n
			}
			s.metrics.Upload(route, n, d, status < 400)
		}
		return err
	}
}

// countingReader counts the bytes read through it.
type countingReader struct {
	r io.ReadCloser
	n int64
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n += int64(n)
	return n, err
}

func (c *countingReader) Close() error { return c.r.Close() }

// jobDone records one run of a background job; a run cut short by shutdown is not a
// failure.
func (s *Server) jobDone(ctx context.Context, job string, start time.Time, err error) {
	if err != nil && ctx.Err() != nil {
		return
	}
	end := time.Now()
	s.metrics.JobRun(job, end, end.Sub(start), err)
}

// MetricsHandler answers GET /metrics in the Prometheus text format. With a metrics
// token configured it answers only requests bearing it (401 otherwise).
func (s *Server) MetricsHandler() http.Handler {
	h := s.metrics.Handler()
	want := sha256.Sum256([]byte(s.cfg.MetricsToken))
	mux := http.NewServeMux()
	mux.HandleFunc("GET /metrics", func(w http.ResponseWriter, r *http.Request) {
		if s.cfg.MetricsToken != "" {
			got, ok := strings.CutPrefix(r.Header.Get("Authorization"), "Bearer ")
			sum := sha256.Sum256([]byte(got))
			if !ok || subtle.ConstantTimeCompare(sum[:], want[:]) != 1 {
				w.Header().Set("WWW-Authenticate", `Bearer realm="beamledger-metrics"`)
				http.Error(w, "a metrics token is required", http.StatusUnauthorized)
				return
			}
		}
		h.ServeHTTP(w, r)
	})
	return mux
}

// ServeMetrics answers scrapes on ln, apart from the API, until ctx ends.
func (s *Server) ServeMetrics(ctx context.Context, ln net.Listener) error {
	hs := &http.Server{
		Handler:           s.MetricsHandler(),
		ReadHeaderTimeout: s.cfg.ReadHeaderTimeout,
		ReadTimeout:       s.cfg.ReadTimeout,
		WriteTimeout:      s.cfg.WriteTimeout,
		IdleTimeout:       s.cfg.IdleTimeout,
		MaxHeaderBytes:    16 << 10,
		ErrorLog:          slog.NewLogLogger(s.log.Handler(), slog.LevelWarn),
	}
	go func() {
		<-ctx.Done()
		sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		_ = hs.Shutdown(sctx)
	}()
	if err := hs.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
		return fmt.Errorf("metrics listener: %w", err)
	}
	return nil
}

// listenMetrics starts the metrics listener when one is configured.
func (s *Server) listenMetrics(ctx context.Context) error {
	if s.cfg.MetricsListen == "" {
		return nil
	}
	ln, err := net.Listen("tcp", s.cfg.MetricsListen)
	if err != nil {
		return fmt.Errorf("metrics listener: %w", err)
	}
	s.log.Info("metrics listening", slog.String("addr", ln.Addr().String()), slog.Bool("token", s.cfg.MetricsToken != ""))
	go func() {
		if err := s.ServeMetrics(ctx, ln); err != nil {
			s.log.Error("metrics listener stopped", slog.Any("error", err))
		}
	}()
	return nil
}
