package main

import (
	"bytes"
	"strings"
	"testing"
	"time"
)

// TestReport writes a report from made-up outcomes [constructed] and checks that
// every fault gets its line, failures and missing tests stand out, and pipes in a
// figure do not break the table.
func TestReport(t *testing.T) {
	var b bytes.Buffer
	write(&b, time.Date(2026, 12, 2, 3, 0, 0, 0, time.UTC), 4*time.Minute, []outcome{
		{f: faults[0], ok: true, took: 28 * time.Second},
		{f: faults[1], ok: false, took: 30 * time.Second, figures: []string{"a | b"}},
		{f: faults[len(faults)-1], missing: true, err: "exit status 1"},
	})
	out := b.String()
	for _, want := range []string{"- 1 of 3 faults held", "| the server is killed (SIGKILL) in the middle of a multipart upload | `TestUploadSurvivesServerKill` cmd/beamledger | yes |  | 28s |",
		"| **no** | a \\| b | 30s |", "| **no such test** | exit status 1 |"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	// The lines the tests and the fuzzer print.
	if m := figureLine.FindStringSubmatch("    dbfault_test.go:166: figure: 6112 answers"); m == nil || m[1] != "6112 answers" {
		t.Errorf("figure line: %v", m)
	}
	if m := fuzzLine.FindStringSubmatch("fuzz: elapsed: 20s, execs: 314597 (23194/sec), new interesting: 83 (total: 94)"); m == nil || m[1] != "314597" || m[3] != "94" {
		t.Errorf("fuzz line: %v", m)
	}
}
