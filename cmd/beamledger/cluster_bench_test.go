package main

import (
	"encoding/json"
	"fmt"
	"net/http"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// BenchmarkLedgerAppend measures ledger appends as a facility makes them: 64
// writers spread over three server processes over one PostgreSQL, each creating
// specimens (one ledger event written in the specimen's own transaction). It
// reports events/s, p50/p99 latency of one append (the whole request), and how long
// after the last write every event was sealed (the sealers run every 200 ms in each
// process). Run with
//
//	go run ./deploy/testenv -- go test -run '^$' -bench LedgerAppend -benchtime 20000x ./cmd/beamledger/
func BenchmarkLedgerAppend(b *testing.B) {
	const writers = 64
	c := newCluster(b, "BEAMLEDGER_LEDGER_SEAL_INTERVAL=200ms")
	client := &http.Client{Transport: &http.Transport{MaxIdleConnsPerHost: writers}}
	var next atomic.Int64
	var mu sync.Mutex
	lat := make([]time.Duration, 0, b.N)
	var wg sync.WaitGroup
	b.ResetTimer()
	start := time.Now()
	for w := range writers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			u := c.researchers[w%len(c.researchers)]
			for {
				i := next.Add(1)
				if i > int64(b.N) {
					return
				}
				body := fmt.Sprintf(`{"project_id":%q,"code":"B-%d"}`, u.project, i)
				req, _ := http.NewRequest(http.MethodPost, c.base(int(i))+"/api/v1/specimens", strings.NewReader(body))
				req.Header.Set("Content-Type", "application/json")
				req.Header.Set("Authorization", "Bearer "+u.token)
				t0 := time.Now()
				res, err := client.Do(req)
				d := time.Since(t0)
				if err != nil {
					b.Error(err)
					return
				}
				res.Body.Close()
				if res.StatusCode != http.StatusCreated {
					b.Errorf("status %d", res.StatusCode)
					return
				}
				mu.Lock()
				lat = append(lat, d)
				mu.Unlock()
			}
		}()
	}
	wg.Wait()
	elapsed := time.Since(start)
	wrote := time.Now()
	waitFor(b, time.Minute, "every event sealed", func() bool {
		st, body, _, err := c.call(0, http.MethodGet, "/api/v1/ledger", "", nil, nil)
		var h struct{ Unsealed int64 }
		return err == nil && st == http.StatusOK && json.Unmarshal(body, &h) == nil && h.Unsealed == 0
	})
	lag := time.Since(wrote)
	b.StopTimer()
	slices.Sort(lat)
	pct := func(p float64) float64 { return float64(lat[int(p*float64(len(lat)-1))]) / float64(time.Millisecond) }
	b.ReportMetric(float64(len(lat))/elapsed.Seconds(), "events/s")
	b.ReportMetric(pct(0.50), "p50-ms")
	b.ReportMetric(pct(0.99), "p99-ms")
	b.ReportMetric(float64(lag)/float64(time.Millisecond), "seal-lag-ms")
}
