package main

import (
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
)

type report struct {
	Started  time.Time
	Machine  string
	Versions []string
	Suites   []suiteResult
}

type suiteResult struct {
	Suite   suite
	Took    time.Duration
	Err     string
	Medians map[ref]float64
	Runs    map[ref]int
}

// outcome is a figure's value, its ratio and whether the target was met.
type outcome struct {
	value, ratio float64
	haveRatio    bool
	runs         int
	missing      string
	met          *bool
}

func (s suiteResult) outcome(f figure) outcome {
	var o outcome
	v, ok := s.Medians[f.Of]
	if !ok {
		o.missing = f.Of.Bench + " " + f.Of.Unit
		return o
	}
	if f.Seconds {
		v /= 1e9
	}
	o.value, o.runs = v, s.Runs[f.Of]
	x := v
	if f.Per != nil {
		a, ok := s.Medians[*f.Per]
		if !ok || a == 0 {
			o.missing = f.Per.Bench + " " + f.Per.Unit
			return o
		}
		o.ratio, o.haveRatio = v/a, true
		x = o.ratio
	}
	if f.Op != "" {
		met := (f.Op == "≥" && x >= f.Limit) || (f.Op == "≤" && x <= f.Limit)
		o.met = &met
	}
	return o
}

func num(v float64) string {
	switch {
	case v >= 1e6:
		return strconv.FormatFloat(v/1e6, 'f', 1, 64) + "M"
	case v >= 100:
		return strconv.FormatFloat(v, 'f', 0, 64)
	case v >= 10:
		return strconv.FormatFloat(v, 'f', 1, 64)
	}
	return strconv.FormatFloat(v, 'f', 2, 64)
}

// value words a median with its unit; durations per op are shown in seconds.
func value(v float64, unit string) string {
	if unit == "ns/op" {
		return (time.Duration(v) * time.Nanosecond).Round(time.Millisecond).String() + " per op"
	}
	return num(v) + " " + unit
}

func (r report) write(w io.Writer) {
	fmt.Fprintln(w, "# Benchmarks")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Written by `make bench` (deploy/benchreport), which runs every benchmark beside its anchor in one run on")
	fmt.Fprintln(w, "one machine and reports medians. Raw `go test -bench` output is in bench-results/ after a run.")
	fmt.Fprintln(w)
	fmt.Fprintf(w, "- Run: %s\n", r.Started.Format("2006-01-02 15:04 MST"))
	fmt.Fprintf(w, "- Machine: %s\n", r.Machine)
	fmt.Fprintf(w, "- Versions: %s\n", strings.Join(r.Versions, ", "))
	met, missed := 0, 0
	for _, s := range r.Suites {
		for _, f := range s.Suite.Figures {
			if o := s.outcome(f); o.met != nil {
				if *o.met {
					met++
				} else {
					missed++
				}
			}
		}
	}
	fmt.Fprintf(w, "- Targets: %d met, %d not met\n", met, missed)
	for _, s := range r.Suites {
		fmt.Fprintf(w, "\n## %s\n\n%s\n\n", s.Suite.Name, s.Suite.About)
		fmt.Fprintf(w, "`%s` (%s)\n\n", strings.Join(s.Suite.command(), " "), s.Took.Round(time.Second))
		if s.Err != "" {
			fmt.Fprintf(w, "**The run failed:** %s\n\n", s.Err)
		}
		fmt.Fprintln(w, "| figure | median | anchor | ratio | target | met |")
		fmt.Fprintln(w, "|---|---|---|---|---|---|")
		for _, f := range s.Suite.Figures {
			o := s.outcome(f)
			if o.missing != "" {
				fmt.Fprintf(w, "| %s | — (no %s in the output) | | | %s | |\n", f.Label, o.missing, target(f))
				continue
			}
			anchorCol, ratioCol := "", ""
			if f.Per != nil {
				anchorCol = value(s.Medians[*f.Per], f.Per.Unit)
				ratioCol = num(o.ratio)
			}
			metCol := ""
			if o.met != nil {
				metCol = "yes"
				if !*o.met {
					metCol = "**no**"
				}
			}
			runs := fmt.Sprintf("%d runs", o.runs)
			if o.runs == 1 {
				runs = "1 run"
			}
			shown := value(o.value, f.Of.Unit)
			if f.Seconds {
				shown = num(o.value) + " s"
			}
			fmt.Fprintf(w, "| %s | %s (%s) | %s | %s | %s | %s |\n", f.Label, shown, runs, anchorCol, ratioCol, target(f), metCol)
		}
	}
}

func target(f figure) string {
	if f.Op == "" {
		return ""
	}
	t := f.Op + " " + num(f.Limit)
	if f.Per != nil {
		t += " ×"
	}
	return t
}
