package provenance

import (
	"encoding/json"
	"math/rand/v2"
	"testing"
	"time"
)

// compactJSONCases are edge cases of RFC 8259's grammar, each with what
// encoding/json.Valid says of it [computed: Go's encoding/json, the general
// validator compactJSON stands in for], except that compactJSON also refuses any
// control character, which RFC 8785 output never holds.
var compactJSONCases = []string{
	`{}`, `[]`, `{"a":1}`, `[1,2,3]`, `"x"`, `0`, `-0`, `1e5`, `1E+5`, `-1.5e-7`, `true`, `false`, `null`,
	`01`, `1.`, `.5`, `+1`, `1e`, `--1`, `{"a":1,}`, `[1,]`, `[1 2]`, `{"a" 1}`, `{a:1}`, `nul`, `tru`,
	`"\u12"`, `"\u12g4"`, `"\x"`, `"unterminated`, `{"a":{"b":[1,{"c":null}]}}`, `"\ud800"`, "\"\xff\"",
	`"é€\u2028"`, `{"a":1}{"b":2}`, `1 2`, `[`, `]`, `{"a":1`, `"\/"`, `"a\"b"`, ` 1`, `1 `,
}

func TestCompactJSONAgreesWithEncodingJSON(t *testing.T) {
	for _, c := range compactJSONCases {
		b := []byte(c)
		want := json.Valid(b) && !hasControl(b)
		if got := compactJSON(b); got != want {
			t.Errorf("compactJSON(%q) = %v, encoding/json says %v", c, got, want)
		}
	}
	// Control characters are refused even where JSON allows them (whitespace)
	// and where it does not (raw in a string).
	for _, c := range []string{"[1,\n2]", "{\"a\":\t1}", "\"a\x00b\"", "\"\x1f\"", "\r1"} {
		if compactJSON([]byte(c)) {
			t.Errorf("compactJSON(%q) accepted a control character", c)
		}
	}
	if compactJSON(nil) {
		t.Error("compactJSON accepted no bytes")
	}
}

// FuzzCompactJSON checks compactJSON against encoding/json.Valid [computed: Go's
// encoding/json] on every input: they agree unless the input holds a control
// character, which compactJSON always refuses.
func FuzzCompactJSON(f *testing.F) {
	for _, c := range compactJSONCases {
		f.Add([]byte(c))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		got := compactJSON(b)
		if hasControl(b) {
			if got {
				t.Fatalf("compactJSON(%q) accepted a control character", b)
			}
			return
		}
		if want := json.Valid(b); got != want {
			t.Fatalf("compactJSON(%q) = %v, encoding/json.Valid = %v", b, got, want)
		}
	})
}

func hasControl(b []byte) bool {
	for _, c := range b {
		if c < 0x20 {
			return true
		}
	}
	return false
}

// TestAppendLeafTime checks the audit's time writer against time.Format with the
// leaf layout [computed: Go's time package], over instants that exercise every
// field's width, the zone conversion, and years leafTime cannot write in four digits.
func TestAppendLeafTime(t *testing.T) {
	zone := time.FixedZone("UTC+13:45", 13*3600+45*60)
	times := []time.Time{
		time.Date(2031, 3, 14, 9, 26, 53, 589793000, time.UTC),
		time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC),
		time.Date(9999, 12, 31, 23, 59, 59, 999999000, time.UTC),
		time.Date(2026, 12, 2, 0, 0, 0, 1000, zone),
		time.Date(2000, 2, 29, 12, 0, 7, 10000, zone),
		time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC),
		time.Date(-1, 6, 1, 0, 0, 0, 0, time.UTC),
	}
	r := rand.New(rand.NewPCG(7, 11))
	for range 2000 {
		times = append(times, time.Unix(r.Int64N(253402300800), r.Int64N(1e9)).Truncate(time.Microsecond))
	}
	for _, at := range times {
		if got, want := string(appendLeafTime([]byte("x"), at)), "x"+at.UTC().Format(leafTime); got != want {
			t.Errorf("appendLeafTime(%v) = %s, want %s", at, got, want)
		}
	}
}
