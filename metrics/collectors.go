package metrics

import (
	"context"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// funcCollector reports gauges and counters computed at scrape time.
type funcCollector struct {
	descs   []*prometheus.Desc
	collect func(chan<- prometheus.Metric)
}

func (c funcCollector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range c.descs {
		ch <- d
	}
}

func (c funcCollector) Collect(ch chan<- prometheus.Metric) { c.collect(ch) }

// poolCollector reports a connection pool's state under prefix; what names the
// pool in the help texts.
func poolCollector(prefix, what string, read func() PoolStats) prometheus.Collector {
	desc := func(name, help string, labels ...string) *prometheus.Desc {
		return prometheus.NewDesc(prefix+name, what+": "+help, labels, nil)
	}
	conns := desc("connections", "connections by state (acquired, idle, constructing, total, max).", "state")
	acquires := desc("acquires_total", "connections acquired.")
	empty := desc("empty_acquires_total", "acquisitions that waited because the pool had no idle connection.")
	canceled := desc("canceled_acquires_total", "acquisitions given up before a connection came.")
	wait := desc("acquire_wait_seconds_total", "total time spent waiting for a connection.")
	return funcCollector{
		descs: []*prometheus.Desc{conns, acquires, empty, canceled, wait},
		collect: func(ch chan<- prometheus.Metric) {
			s := read()
			for state, n := range map[string]int32{"acquired": s.Acquired, "idle": s.Idle,
				"constructing": s.Constructing, "total": s.Total, "max": s.Max} {
				ch <- prometheus.MustNewConstMetric(conns, prometheus.GaugeValue, float64(n), state)
			}
			ch <- prometheus.MustNewConstMetric(acquires, prometheus.CounterValue, float64(s.Acquires))
			ch <- prometheus.MustNewConstMetric(empty, prometheus.CounterValue, float64(s.EmptyAcquires))
			ch <- prometheus.MustNewConstMetric(canceled, prometheus.CounterValue, float64(s.CanceledAcquires))
			ch <- prometheus.MustNewConstMetric(wait, prometheus.CounterValue, s.AcquireWait.Seconds())
		},
	}
}

// ledgerScrapeTimeout bounds the database reads of one scrape.
const ledgerScrapeTimeout = 5 * time.Second

var (
	ledgerSizeDesc = prometheus.NewDesc("beamledger_ledger_size",
		"Events sealed into the ledger's Merkle tree (the tree size).", nil, nil)
	ledgerUnsealedDesc = prometheus.NewDesc("beamledger_ledger_unsealed_events",
		"Committed ledger events not yet sealed into the tree.", nil, nil)
	ledgerLagDesc = prometheus.NewDesc("beamledger_ledger_sealing_lag_seconds",
		"Age of the oldest committed event not yet sealed; 0 when every event is sealed.", nil, nil)
	ledgerUpDesc = prometheus.NewDesc("beamledger_ledger_stats_up",
		"1 when the ledger's state could be read for this scrape, else 0.", nil, nil)
)

// ledgerCollector reads the ledger's size and sealing lag from the database.
type ledgerCollector struct {
	read func(context.Context) (LedgerStats, error)
	now  func() time.Time
}

func (c *ledgerCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- ledgerSizeDesc
	ch <- ledgerUnsealedDesc
	ch <- ledgerLagDesc
	ch <- ledgerUpDesc
}

func (c *ledgerCollector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), ledgerScrapeTimeout)
	defer cancel()
	s, err := c.read(ctx)
	if err != nil {
		ch <- prometheus.MustNewConstMetric(ledgerUpDesc, prometheus.GaugeValue, 0)
		return
	}
	lag := 0.0
	if !s.OldestUnsealed.IsZero() {
		lag = max(c.now().Sub(s.OldestUnsealed).Seconds(), 0)
	}
	ch <- prometheus.MustNewConstMetric(ledgerUpDesc, prometheus.GaugeValue, 1)
	ch <- prometheus.MustNewConstMetric(ledgerSizeDesc, prometheus.GaugeValue, float64(s.Size))
	ch <- prometheus.MustNewConstMetric(ledgerUnsealedDesc, prometheus.GaugeValue, float64(s.Unsealed))
	ch <- prometheus.MustNewConstMetric(ledgerLagDesc, prometheus.GaugeValue, lag)
}
