package main

import (
	"bytes"
	"regexp"
	"slices"
	"strings"

	"golang.org/x/perf/benchfmt"
)

// procs is the -N suffix go test adds to a benchmark's name.
var procs = regexp.MustCompile(`-\d+$`)

// medians reads go test -bench output and returns the median of every benchmark's
// every unit, keyed by benchmark (without "Benchmark" and -N) and unit, with how
// many runs each median is over.
func medians(output []byte) (map[ref]float64, map[ref]int, error) {
	values := map[ref][]float64{}
	r := benchfmt.NewReader(bytes.NewReader(output), "output")
	for r.Scan() {
		res, ok := r.Result().(*benchfmt.Result)
		if !ok {
			continue
		}
		name := procs.ReplaceAllString(strings.TrimPrefix(res.Name.String(), "Benchmark"), "")
		for _, v := range res.Values {
			unit, val := v.Unit, v.Value
			if v.OrigUnit != "" {
				unit, val = v.OrigUnit, v.OrigValue
			}
			k := ref{name, unit}
			values[k] = append(values[k], val)
		}
	}
	med := map[ref]float64{}
	runs := map[ref]int{}
	for k, vs := range values {
		slices.Sort(vs)
		n := len(vs)
		m := vs[n/2]
		if n%2 == 0 {
			m = (vs[n/2-1] + vs[n/2]) / 2
		}
		med[k], runs[k] = m, n
	}
	return med, runs, r.Err()
}
