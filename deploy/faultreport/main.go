// Command faultreport runs the fault suite, one test or fuzz target at a time, and
// writes RELIABILITY.md with one line per fault: what was done, the test that does
// it, whether it held, and the figures the test reports (its "figure:" log lines).
// Run it under deploy/testenv (make faults does), which provides the PostgreSQL and
// S3 servers:
//
//	go run ./deploy/testenv -- go run ./deploy/faultreport [-fuzztime 4m] [-only name,...]
//
// Fuzzing keeps its corpus: the inputs a target found interesting are copied from
// Go's fuzz cache into the package's testdata/fuzz/<target>/, where `go test` runs
// them as regression inputs ever after.
package main

import (
	"bytes"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"time"

	"beamledger/storage/postgres/pgtest"
)

// fault is one line of the report.
type fault struct {
	Name    string // short, for -only
	What    string // the fault, as the report words it
	Package string
	Test    string // a test name, or a fuzz target (Fuzz…)
	Env     []string
}

var faults = []fault{
	{"kill-upload", "the server is killed (SIGKILL) in the middle of a multipart upload", "./cmd/beamledger/", "TestUploadSurvivesServerKill", nil},
	{"db-crash", "PostgreSQL stops with an immediate shutdown for 3 s under booking load", "./server/", "TestDatabaseCrashUnderLoad", nil},
	{"s3-down", "the S3 server is unreachable for 60 s, an upload cut off halfway", "./server/", "TestObjectStoreOutage", []string{"BEAMLEDGER_FAULT_OUTAGE=60s"}},
	{"ledger-sql", "ledger rows edited, deleted, inserted and reordered in SQL", "./storage/postgres/", "TestLedgerAuditCatchesSQLTampering", nil},
	{"ledger-verify", "`ledger verify` on an intact and on an edited ledger", "./cmd/beamledger/", "TestLedgerCommands", nil},
	{"bundle-tamper", "each part of a provenance bundle tampered with", "./provenance/bundle/", "TestBundleTampering", nil},
	{"three-processes", "three server processes over one database and one S3 bucket", "./cmd/beamledger/", "TestThreeProcesses", nil},
	{"clock-skew", "one process's clock two minutes ahead of another's", "./server/", "TestClockTwoMinutesOff", nil},
	{"huge-input", "a 10 MiB JSON body; page sizes and spans far beyond the caps", "./server/", "TestHugeBodiesAndPages", nil},
	{"slow-headers", "clients that never finish sending their headers", "./server/", "TestSlowHeadersDropped", nil},
	{"login-storm", "300 logins at once, right and wrong passwords", "./server/", "TestLoginStormBoundedMemory", nil},
	{"fuzz-quantity", "fuzzing the quantity parser (operating conditions)", "./provenance/quantity/", "FuzzParse", nil},
	{"fuzz-time", "fuzzing booking times (RFC 3339 instants and facility wall times)", "./scheduling/", "FuzzParseInstant", nil},
	{"fuzz-rrule", "fuzzing recurrence rules (RFC 5545 RRULE)", "./scheduling/", "FuzzExpand", nil},
	{"fuzz-checkpoint", "fuzzing the signed-checkpoint reader", "./provenance/", "FuzzOpenCheckpoint", nil},
	{"fuzz-bundle", "fuzzing the provenance-bundle reader", "./provenance/bundle/", "FuzzVerify", nil},
}

type outcome struct {
	f       fault
	ok      bool
	missing bool // the package has no such test
	took    time.Duration
	figures []string
	err     string
}

func main() {
	fuzztime := flag.Duration("fuzztime", 4*time.Minute, "how long each fuzz target runs")
	only := flag.String("only", "", "comma-separated faults to run (default: all)")
	out := flag.String("out", "RELIABILITY.md", "the report to write")
	flag.Parse()
	if os.Getenv(pgtest.EnvURL) == "" {
		fmt.Fprintf(os.Stderr, "faultreport: %s is not set: run under deploy/testenv (make faults)\n", pgtest.EnvURL)
		os.Exit(1)
	}
	chosen := faults
	if *only != "" {
		chosen = nil
		for _, n := range strings.Split(*only, ",") {
			i := slices.IndexFunc(faults, func(f fault) bool { return f.Name == n })
			if i < 0 {
				fmt.Fprintf(os.Stderr, "faultreport: no fault %q\n", n)
				os.Exit(2)
			}
			chosen = append(chosen, faults[i])
		}
	}
	started := time.Now().UTC()
	var results []outcome
	for _, f := range chosen {
		fmt.Fprintf(os.Stderr, "faultreport: %s (%s %s)\n", f.Name, f.Package, f.Test)
		results = append(results, run(f, *fuzztime))
	}
	var b bytes.Buffer
	write(&b, started, *fuzztime, results)
	if err := os.WriteFile(*out, b.Bytes(), 0o644); err != nil {
		fmt.Fprintln(os.Stderr, "faultreport:", err)
		os.Exit(1)
	}
	fmt.Fprintf(os.Stderr, "faultreport: wrote %s\n", *out)
	for _, r := range results {
		if !r.ok {
			os.Exit(1)
		}
	}
}

var (
	figureLine = regexp.MustCompile(`figure: (.*)$`)
	fuzzLine   = regexp.MustCompile(`execs: (\d+) .*new interesting: (\d+) \(total: (\d+)\)`)
)

func run(f fault, fuzztime time.Duration) outcome {
	args := []string{"test", "-count=1", "-v", "-run", "^" + f.Test + "$", "-timeout", "30m", f.Package}
	fuzz := strings.HasPrefix(f.Test, "Fuzz")
	if fuzz {
		args = []string{"test", "-run", "^$", "-fuzz", "^" + f.Test + "$", "-fuzztime", fuzztime.String(), f.Package}
	}
	cmd := exec.Command("go", args...)
	cmd.Env = append(os.Environ(), f.Env...)
	var buf bytes.Buffer
	cmd.Stdout = io.MultiWriter(&buf, os.Stderr)
	cmd.Stderr = cmd.Stdout
	t0 := time.Now()
	err := cmd.Run()
	o := outcome{f: f, ok: err == nil, took: time.Since(t0)}
	out := buf.String()
	if err != nil {
		o.err = err.Error()
	}
	if !fuzz && strings.Contains(out, "testing: warning: no tests to run") {
		o.ok, o.missing = false, true
	}
	if fuzz && strings.Contains(out, "no fuzz tests to fuzz") {
		o.ok, o.missing = false, true
	}
	for _, line := range strings.Split(out, "\n") {
		if m := figureLine.FindStringSubmatch(line); m != nil {
			o.figures = append(o.figures, m[1])
		}
	}
	if fuzz && !o.missing {
		if ms := fuzzLine.FindAllStringSubmatch(out, -1); len(ms) > 0 {
			m := ms[len(ms)-1]
			o.figures = append(o.figures, fmt.Sprintf("%s inputs in %v, %s new interesting (corpus %s), no failure", m[1], fuzztime, m[2], m[3]))
		}
		if n, err := keepCorpus(f); err != nil {
			o.figures = append(o.figures, "corpus not kept: "+err.Error())
		} else if n > 0 {
			o.figures = append(o.figures, fmt.Sprintf("%d corpus entries kept in testdata", n))
		}
	}
	return o
}

// keepCorpus copies the fuzz cache's entries for the target into the package's
// testdata/fuzz/<target>/ and returns how many are there now.
func keepCorpus(f fault) (int, error) {
	cache, err := exec.Command("go", "env", "GOCACHE").Output()
	if err != nil {
		return 0, err
	}
	list, err := exec.Command("go", "list", f.Package).Output()
	if err != nil {
		return 0, err
	}
	src := filepath.Join(strings.TrimSpace(string(cache)), "fuzz", strings.TrimSpace(string(list)), f.Test)
	dst := filepath.Join(f.Package, "testdata", "fuzz", f.Test)
	entries, err := os.ReadDir(src)
	if os.IsNotExist(err) {
		return 0, nil
	}
	if err != nil {
		return 0, err
	}
	if err := os.MkdirAll(dst, 0o755); err != nil {
		return 0, err
	}
	for _, e := range entries {
		b, err := os.ReadFile(filepath.Join(src, e.Name()))
		if err != nil {
			return 0, err
		}
		if err := os.WriteFile(filepath.Join(dst, e.Name()), b, 0o644); err != nil {
			return 0, err
		}
	}
	kept, err := os.ReadDir(dst)
	return len(kept), err
}

func write(w io.Writer, started time.Time, fuzztime time.Duration, rs []outcome) {
	held := 0
	var took time.Duration
	for _, r := range rs {
		if r.ok {
			held++
		}
		took += r.took
	}
	fmt.Fprintln(w, "# Reliability")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Written by `make faults` (deploy/faultreport), which runs each fault below as its own `go test`")
	fmt.Fprintln(w, "against the harness's PostgreSQL and S3 servers. The figures are the tests' own measurements.")
	fmt.Fprintln(w)
	fmt.Fprintf(w, "- Run: %s, %v in all; each fuzz target ran %v\n", started.Format("2006-01-02 15:04 MST"), took.Round(time.Second), fuzztime)
	fmt.Fprintf(w, "- %d of %d faults held\n\n", held, len(rs))
	fmt.Fprintln(w, "| fault | test | held | figures | time |")
	fmt.Fprintln(w, "|---|---|---|---|---|")
	for _, r := range rs {
		state := "yes"
		switch {
		case r.missing:
			state = "**no such test**"
		case !r.ok:
			state = "**no**"
		}
		figs := strings.Join(r.figures, "; ")
		if figs == "" && r.err != "" {
			figs = r.err
		}
		fmt.Fprintf(w, "| %s | `%s` %s | %s | %s | %v |\n", r.f.What, r.f.Test, strings.TrimSuffix(strings.TrimPrefix(r.f.Package, "./"), "/"), state,
			strings.ReplaceAll(figs, "|", "\\|"), r.took.Round(time.Second))
	}
}
