package scheduling

import (
	"encoding/json"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/gowebpki/jcs"
)

// generalCanonical is the general way: encoding/json, then RFC 8785 canonicalization
// by github.com/gowebpki/jcs, the library the ledger uses for every other state.
func generalCanonical(t testing.TB, v any) []byte {
	t.Helper()
	raw, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	canon, err := jcs.Transform(raw)
	if err != nil {
		t.Fatal(err)
	}
	return canon
}

// awkward are strings that exercise RFC 8785 §3.2.2.2's escaping: quotes, backslashes,
// every named control escape, other control characters, DEL, characters encoding/json
// escapes for HTML or JavaScript (which RFC 8785 writes as they are), non-ASCII, and a
// character outside the Basic Multilingual Plane.
var awkward = []string{"", "plain", `say "hi"`, `back\slash`, "tab\there", "new\nline", "cr\rret", "bs\bff\f",
	"nul\x00", "unit\x1fsep", "del\x7f", "<b>&amp;</b>", "line\u2028para\u2029", "café", "µm", "Å", "😀",
	"/slash/", "mixed \"\\\x01 é 😀"}

// randomRecord makes a record with every optional member both present and absent
// across calls, nil and empty slices, and integers across the range written exactly.
func randomRecord(r *rand.Rand) StatementRecord {
	str := func() string { return awkward[r.IntN(len(awkward))] }
	num := func() int64 {
		switch r.IntN(4) {
		case 0:
			return 0
		case 1:
			return -r.Int64N(1 << 53)
		case 2:
			return 1<<53 - r.Int64N(3)
		}
		return r.Int64N(1_000_000)
	}
	var prev time.Time // instants repeat, as a line's from repeats its booking's start
	instant := func() *time.Time {
		if r.IntN(3) == 0 {
			return nil
		}
		if !prev.IsZero() && r.IntN(3) == 0 {
			t := prev
			return &t
		}
		t := time.Date(2000+r.IntN(60), time.Month(1+r.IntN(12)), 1+r.IntN(28), r.IntN(24), r.IntN(60), r.IntN(60),
			[]int{0, 1000, 120_000_000, 123_456_789}[r.IntN(4)], time.UTC)
		prev = t
		return &t
	}
	allocs := func() []Allocation {
		switch r.IntN(4) {
		case 0:
			return nil
		case 1:
			return []Allocation{}
		}
		out := make([]Allocation, 1+r.IntN(3))
		for i := range out {
			out[i] = Allocation{AccountID: str(), AmountMinor: num()}
		}
		return out
	}
	rec := StatementRecord{ID: str(), ProjectID: str(), Currency: str(), PeriodStart: *instantOr(instant(), time.Unix(0, 0).UTC()),
		PeriodEnd: *instantOr(instant(), time.Date(2031, 4, 1, 0, 0, 0, 0, time.UTC)), Status: StatementStatus(str()),
		IssuedAt: instant(), AccountTotals: allocs(), TotalMinor: num()}
	if r.IntN(5) > 0 {
		rec.ComponentTotals = []ComponentTotal{}
		for range r.IntN(3) {
			rec.ComponentTotals = append(rec.ComponentTotals, ComponentTotal{Component: ChargeComponent(str()), AmountMinor: num()})
		}
	}
	if r.IntN(5) > 0 {
		rec.Lines = []StatementLine{}
		for i := range r.IntN(4) {
			rec.Lines = append(rec.Lines, StatementLine{LineNo: i + 1, BookingID: str(), InstrumentID: str(),
				BookingKind: BookingKind(str()), BookingStart: instant(), Component: ChargeComponent(str()), Rule: ChargeRule(str()),
				From: instant(), To: instant(), Minutes: int(num() % 100_000), HourlyRateMinor: num(), AmountMinor: num(),
				Reason: str(), AdjustmentID: str(), CorrectsStatementID: str(), Allocations: allocs()})
		}
	}
	return rec
}

func instantOr(t *time.Time, or time.Time) *time.Time {
	if t == nil {
		return &or
	}
	return t
}

// TestStatementCanonicalJSONIsTheGeneralWays holds the record's own canonical writer
// to the general way, byte for byte, over records built to reach every branch.
func TestStatementCanonicalJSONIsTheGeneralWays(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 11))
	for i := range 5000 {
		rec := randomRecord(r)
		got, err := rec.AppendCanonicalJSON(nil)
		if err != nil {
			t.Fatalf("record %d: %v", i, err)
		}
		// [computed] github.com/gowebpki/jcs (RFC 8785) over encoding/json's output.
		if want := generalCanonical(t, rec); string(got) != string(want) {
			t.Fatalf("record %d:\n got %s\nwant %s", i, got, want)
		}
	}
	// A record as pricing makes one, end to end.
	rec := StatementRecord{ID: "s", ProjectID: "p", Currency: "EUR", Status: StatementDraft,
		PeriodStart: time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC), PeriodEnd: time.Date(2031, 4, 1, 0, 0, 0, 0, time.UTC)}
	got, err := rec.AppendCanonicalJSON([]byte("prefix:"))
	if err != nil || !strings.HasPrefix(string(got), "prefix:{") || string(got[len("prefix:"):]) != string(generalCanonical(t, rec)) {
		t.Fatalf("appending after a prefix: %s, %v", got, err)
	}
}

// TestStatementCanonicalJSONDeclinesWhatItCannotWrite checks that the values the
// writer does not cover are reported (the ledger then uses the general way) rather
// than written differently.
func TestStatementCanonicalJSONDeclinesWhatItCannotWrite(t *testing.T) {
	base := StatementRecord{ID: "s", PeriodStart: time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC), PeriodEnd: time.Date(2031, 4, 1, 0, 0, 0, 0, time.UTC)}
	paris := time.FixedZone("CET", 3600)
	for name, rec := range map[string]StatementRecord{
		"integer beyond 2^53": func() StatementRecord { r := base; r.TotalMinor = 1<<53 + 1; return r }(),
		"not UTF-8":           func() StatementRecord { r := base; r.ProjectID = "\xff"; return r }(),
		"offset not UTC":      func() StatementRecord { r := base; r.PeriodStart = r.PeriodStart.In(paris); return r }(),
		"year 10000": func() StatementRecord {
			r := base
			r.PeriodEnd = time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC)
			return r
		}(),
	} {
		if _, err := rec.AppendCanonicalJSON(nil); err == nil {
			t.Errorf("%s: written, want declined", name)
		}
	}
}

// FuzzStatementCanonicalJSON compares the two ways on fuzzed strings and integers.
func FuzzStatementCanonicalJSON(f *testing.F) {
	for _, s := range awkward {
		f.Add(s, int64(0), int64(60))
	}
	f.Fuzz(func(t *testing.T, s string, amount, rate int64) {
		at := time.Date(2031, 3, 2, 9, 0, 0, 0, time.UTC)
		rec := StatementRecord{ID: s, ProjectID: s, Currency: s, Status: StatementStatus(s), PeriodStart: at, PeriodEnd: at,
			Lines: []StatementLine{{LineNo: 1, BookingID: s, Reason: s, Rule: ChargeRule(s), From: &at, AmountMinor: amount,
				HourlyRateMinor: rate, Allocations: []Allocation{{AccountID: s, AmountMinor: amount}}}}, TotalMinor: amount}
		got, err := rec.AppendCanonicalJSON(nil)
		if err != nil {
			return // declined: the general way is used
		}
		if want := generalCanonical(t, rec); string(got) != string(want) {
			t.Fatalf("got %s\nwant %s", got, want)
		}
	})
}
