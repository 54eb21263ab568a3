// Command benchreport runs the project's benchmarks, each beside the anchor it is
// measured against, in one run on one machine, and writes BENCHMARKS.md: the
// machine, the versions, the median of every figure and every ratio against its
// target. Run it under deploy/testenv (make bench does), which provides the
// PostgreSQL and S3 servers the benchmarks use:
//
//	go run ./deploy/testenv -- go run ./deploy/benchreport [-only booking,ledger] [-out BENCHMARKS.md]
//
// The raw `go test -bench` output of every suite is kept beside the report
// (bench-results/, git-ignored) so that figures can be recomputed with benchstat.
package main

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/deploy/s3server"
	"beamledger/storage/postgres/pgtest"
)

func main() {
	only := flag.String("only", "", "comma-separated suites to run (default: all): "+strings.Join(suiteNames(), ","))
	out := flag.String("out", "BENCHMARKS.md", "the report to write")
	raw := flag.String("raw", "bench-results", "folder for the raw benchmark output")
	flag.Parse()
	if err := run(*only, *out, *raw); err != nil {
		fmt.Fprintln(os.Stderr, "benchreport:", err)
		os.Exit(1)
	}
}

func suiteNames() []string {
	var names []string
	for _, s := range suites {
		names = append(names, s.Name)
	}
	return names
}

func run(only, out, rawDir string) error {
	if os.Getenv(pgtest.EnvURL) == "" {
		return fmt.Errorf("%s is not set: run under deploy/testenv (make bench)", pgtest.EnvURL)
	}
	chosen := suites
	if only != "" {
		chosen = nil
		for _, name := range strings.Split(only, ",") {
			i := slices.IndexFunc(suites, func(s suite) bool { return s.Name == name })
			if i < 0 {
				return fmt.Errorf("no suite %q; there are %s", name, strings.Join(suiteNames(), ", "))
			}
			chosen = append(chosen, suites[i])
		}
	}
	if err := os.MkdirAll(rawDir, 0o755); err != nil {
		return err
	}
	rep := report{Started: time.Now().UTC(), Machine: machine(), Versions: versions()}
	for _, s := range chosen {
		fmt.Fprintf(os.Stderr, "benchreport: suite %s: %s\n", s.Name, strings.Join(s.command(), " "))
		t0 := time.Now()
		output, err := s.run()
		if werr := os.WriteFile(filepath.Join(rawDir, s.Name+".txt"), output, 0o644); werr != nil {
			return werr
		}
		res := suiteResult{Suite: s, Took: time.Since(t0)}
		if err != nil {
			res.Err = err.Error()
		}
		res.Medians, res.Runs, err = medians(output)
		if err != nil && res.Err == "" {
			res.Err = err.Error()
		}
		rep.Suites = append(rep.Suites, res)
	}
	var b bytes.Buffer
	rep.write(&b)
	if err := os.WriteFile(out, b.Bytes(), 0o644); err != nil {
		return err
	}
	fmt.Fprintf(os.Stderr, "benchreport: wrote %s\n", out)
	for _, s := range rep.Suites {
		if s.Err != "" {
			return errors.New("some suites failed; see the report")
		}
	}
	return nil
}

// command is the go test invocation of a suite.
func (s suite) command() []string {
	args := []string{"go", "test", "-run", "^$", "-bench", s.Bench, "-benchtime", s.Benchtime,
		"-count", fmt.Sprint(s.Count), "-timeout", "60m"}
	return append(args, s.Packages...)
}

// run runs the suite, copying its output to stderr as it comes.
func (s suite) run() ([]byte, error) {
	args := s.command()
	cmd := exec.CommandContext(context.Background(), args[0], args[1:]...)
	cmd.Env = append(os.Environ(), s.Env...)
	var buf bytes.Buffer
	cmd.Stdout = io.MultiWriter(&buf, os.Stderr)
	cmd.Stderr = io.MultiWriter(&buf, os.Stderr)
	err := cmd.Run()
	return buf.Bytes(), err
}

// machine describes where the benchmarks ran.
func machine() string {
	cpu := "unknown CPU"
	if b, err := os.ReadFile("/proc/cpuinfo"); err == nil {
		for _, line := range strings.Split(string(b), "\n") {
			if k, v, ok := strings.Cut(line, ":"); ok && strings.TrimSpace(k) == "model name" {
				cpu = strings.TrimSpace(v)
				break
			}
		}
	}
	mem := ""
	if b, err := os.ReadFile("/proc/meminfo"); err == nil {
		var kb int64
		if _, err := fmt.Sscanf(strings.SplitN(string(b), "\n", 2)[0], "MemTotal: %d kB", &kb); err == nil {
			mem = fmt.Sprintf(", %.0f GiB memory", float64(kb)/(1<<20))
		}
	}
	return fmt.Sprintf("%s, %d cores%s, %s/%s", cpu, runtime.NumCPU(), mem, runtime.GOOS, runtime.GOARCH)
}

// versions names the software the figures depend on.
func versions() []string {
	v := []string{"Go " + strings.TrimPrefix(runtime.Version(), "go"), "versitygw " + s3server.Version}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if conn, err := pgx.Connect(ctx, os.Getenv(pgtest.EnvURL)); err == nil {
		var pg string
		if conn.QueryRow(ctx, `SHOW server_version`).Scan(&pg) == nil {
			v = append(v, "PostgreSQL "+pg)
		}
		conn.Close(ctx)
	}
	return v
}
