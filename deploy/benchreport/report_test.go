package main

import (
	"bytes"
	"strings"
	"testing"
)

// sample is go test -bench output in the shape the project's benchmarks write,
// with made-up figures [constructed].
const sample = `goos: linux
goarch: amd64
pkg: beamledger/server
BenchmarkBookingCreate/raw_pgx-2   3000   330000 ns/op   3000 creates/s   2.0 p99-ms
BenchmarkBookingCreate/http-2      3000   700000 ns/op   1400 creates/s   5.0 p99-ms
BenchmarkBookingCreate/raw_pgx-2   3000   330000 ns/op   3100 creates/s   2.1 p99-ms
BenchmarkBookingCreate/http-2      3000   700000 ns/op   1600 creates/s   3.9 p99-ms
BenchmarkBookingCreate/raw_pgx-2   3000   330000 ns/op   2900 creates/s   1.9 p99-ms
BenchmarkBookingCreate/http-2      3000   700000 ns/op   1500 creates/s   4.1 p99-ms
PASS
`

func TestMediansAndOutcomes(t *testing.T) {
	med, runs, err := medians([]byte(sample))
	if err != nil {
		t.Fatal(err)
	}
	// [constructed] medians of three runs: 3000 and 1500 creates/s, 2.0 and 4.1 ms.
	if med[ref{"BookingCreate/raw_pgx", "creates/s"}] != 3000 || med[ref{"BookingCreate/http", "creates/s"}] != 1500 ||
		med[ref{"BookingCreate/http", "p99-ms"}] != 4.1 || runs[ref{"BookingCreate/http", "p99-ms"}] != 3 {
		t.Fatalf("medians %v, runs %v", med, runs)
	}
	s := suiteResult{Suite: suites[0], Medians: med, Runs: runs}
	through := s.outcome(suites[0].Figures[0]) // 1500/3000 = 0.5 ≥ 0.5
	p99 := s.outcome(suites[0].Figures[1])     // 4.1/2.0 = 2.05 > 2
	if !through.haveRatio || through.ratio != 0.5 || through.met == nil || !*through.met {
		t.Errorf("throughput outcome %+v", through)
	}
	if p99.met == nil || *p99.met || p99.ratio != 2.05 {
		t.Errorf("p99 outcome %+v", p99)
	}
	var b bytes.Buffer
	report{Suites: []suiteResult{s, {Suite: suites[2], Medians: map[ref]float64{}, Err: "exit status 1"}}}.write(&b)
	out := b.String()
	for _, want := range []string{"Targets: 1 met, 1 not met", "| bookings created per second, HTTP vs raw insert | 1500 creates/s (3 runs) | 3000 creates/s | 0.50 | ≥ 0.50 × | yes |",
		"| 2.05 | ≤ 2.00 × | **no** |", "**The run failed:** exit status 1", "— (no Ledger/verify ns/op in the output)"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
}
