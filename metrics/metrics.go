// Package metrics keeps the server's operational measurements (requests, uploads,
// background jobs, the database pool and the ledger) and answers them in the
// Prometheus text exposition format. It is the only importer of the Prometheus
// client library; the server talks to it through the plain types below.
package metrics

import (
	"context"
	"net/http"
	"strconv"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// PoolStats is a snapshot of the database connection pool.
type PoolStats struct {
	// Acquired, Idle, Constructing and Total count connections by state; Max is the
	// pool's ceiling.
	Acquired, Idle, Constructing, Total, Max int32
	// Acquires counts successful acquisitions since start; EmptyAcquires those that
	// had to wait for a connection; CanceledAcquires those given up.
	Acquires, EmptyAcquires, CanceledAcquires int64
	// AcquireWait is the total time spent waiting for connections.
	AcquireWait time.Duration
}

// LedgerStats is the ledger's state as a scrape sees it.
type LedgerStats struct {
	// Size is the number of sealed events (the tree size).
	Size int64
	// Unsealed counts committed events not yet sealed into the tree.
	Unsealed int64
	// OldestUnsealed is when the oldest unsealed event was committed; zero when none.
	OldestUnsealed time.Time
}

// Sources are read at each scrape. Ledger may be slow (it asks the database), so a
// scrape gives it a deadline; either may be nil.
type Sources struct {
	Pool func() PoolStats
	// ReplicaPool is the read replica's pool, reported beside the primary's as
	// beamledger_db_replica_pool_*; nil without a replica.
	ReplicaPool func() PoolStats
	Ledger      func(context.Context) (LedgerStats, error)
	Now         func() time.Time
}

// Registry holds the measurements of one server process.
type Registry struct {
	reg            *prometheus.Registry
	requests       *prometheus.CounterVec
	latency        *prometheus.HistogramVec
	uploadBytes    *prometheus.CounterVec
	uploadDuration *prometheus.HistogramVec
	jobRuns        *prometheus.CounterVec
	jobFailures    *prometheus.CounterVec
	jobDuration    *prometheus.HistogramVec
	jobLastSuccess *prometheus.GaugeVec
}

// New makes a registry with the process and Go runtime collectors and collectors
// for src.
func New(src Sources) *Registry {
	r := &Registry{
		reg: prometheus.NewRegistry(),
		requests: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "beamledger_http_requests_total",
			Help: "HTTP requests answered, by method, route template and status.",
		}, []string{"method", "route", "status"}),
		latency: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name:    "beamledger_http_request_duration_seconds",
			Help:    "Time from a request's arrival to its answer, by method, route template and status.",
			Buckets: []float64{.001, .0025, .005, .01, .025, .05, .1, .25, .5, 1, 2.5, 5, 10, 30, 60},
		}, []string{"method", "route", "status"}),
		uploadBytes: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "beamledger_upload_bytes_total",
			Help: "Data-file bytes received in upload request bodies, by route template.",
		}, []string{"route"}),
		uploadDuration: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name:    "beamledger_upload_duration_seconds",
			Help:    "Duration of upload requests, by route template and outcome (ok or error).",
			Buckets: prometheus.ExponentialBuckets(0.01, 4, 10), // 10 ms to about 44 min
		}, []string{"route", "outcome"}),
		jobRuns: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "beamledger_job_runs_total",
			Help: "Background job runs, by job.",
		}, []string{"job"}),
		jobFailures: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "beamledger_job_failures_total",
			Help: "Background job runs that failed, by job.",
		}, []string{"job"}),
		jobDuration: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name:    "beamledger_job_duration_seconds",
			Help:    "Duration of background job runs, by job.",
			Buckets: prometheus.ExponentialBuckets(0.001, 4, 10),
		}, []string{"job"}),
		jobLastSuccess: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "beamledger_job_last_success_timestamp_seconds",
			Help: "Unix time of the last successful run, by job.",
		}, []string{"job"}),
	}
	now := src.Now
	if now == nil {
		now = time.Now
	}
	r.reg.MustRegister(r.requests, r.latency, r.uploadBytes, r.uploadDuration,
		r.jobRuns, r.jobFailures, r.jobDuration, r.jobLastSuccess,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	if src.Pool != nil {
		r.reg.MustRegister(poolCollector("beamledger_db_pool_", "Database pool", src.Pool))
	}
	if src.ReplicaPool != nil {
		r.reg.MustRegister(poolCollector("beamledger_db_replica_pool_", "Read-replica pool", src.ReplicaPool))
	}
	if src.Ledger != nil {
		r.reg.MustRegister(&ledgerCollector{read: src.Ledger, now: now})
	}
	return r
}

// Request records one answered request. route is the route template (never the raw
// path, whose identifiers would make a series per record).
func (r *Registry) Request(method, route string, status int, d time.Duration) {
	code := strconv.Itoa(status)
	r.requests.WithLabelValues(method, route, code).Inc()
	r.latency.WithLabelValues(method, route, code).Observe(d.Seconds())
}

// Upload records one upload request: the body bytes read and how long it took.
func (r *Registry) Upload(route string, bytes int64, d time.Duration, ok bool) {
	outcome := "ok"
	if !ok {
		outcome = "error"
	}
	r.uploadBytes.WithLabelValues(route).Add(float64(bytes))
	r.uploadDuration.WithLabelValues(route, outcome).Observe(d.Seconds())
}

// JobRun records one run of a background job that ended at end after d; err is its
// failure, if any.
func (r *Registry) JobRun(job string, end time.Time, d time.Duration, err error) {
	r.jobRuns.WithLabelValues(job).Inc()
	r.jobDuration.WithLabelValues(job).Observe(d.Seconds())
	if err != nil {
		r.jobFailures.WithLabelValues(job).Inc()
		return
	}
	r.jobLastSuccess.WithLabelValues(job).Set(float64(end.UnixNano()) / 1e9)
}

// Handler answers scrapes in the Prometheus text format. A collector that fails
// leaves its series out instead of failing the scrape.
func (r *Registry) Handler() http.Handler {
	return promhttp.HandlerFor(r.reg, promhttp.HandlerOpts{ErrorHandling: promhttp.ContinueOnError})
}
