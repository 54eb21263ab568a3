package provenance

import (
	"encoding/json"
	"testing"
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
