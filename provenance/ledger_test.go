package provenance_test

import (
	"bytes"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"strings"
	"testing"
	"time"

	"github.com/gowebpki/jcs"
	"golang.org/x/mod/sumdb/tlog"

	"beamledger/provenance"
	"beamledger/scheduling"
)

func mustHex(t *testing.T, s string) []byte {
	t.Helper()
	b, err := hex.DecodeString(s)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestTreeBuilderRFC6962Vectors hashes the published leaves through TreeBuilder, the
// path the sealer and verify use, and compares every root.
func TestTreeBuilderRFC6962Vectors(t *testing.T) {
	// [published: RFC 6962 §2.1] leaves "", 00, 10, 2021 (hex) and the roots of the
	// trees of their first 1, 2, 3 and 4 leaves, as listed in REFERENCE.md §4.
	leaves := []string{"", "00", "10", "2021"}
	roots := []string{
		"6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d",
		"fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125",
		"aeb6bcfe274b70a14fb067a5e5578264db0fa9b51af5e0ba159158f329e06e77",
		"d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
	}
	b := provenance.NewTreeBuilder()
	empty, err := b.Root()
	if err != nil {
		t.Fatal(err)
	}
	// [published: RFC 6962 §2.1] the empty tree's hash is SHA-256 of the empty
	// string, e3b0c442…b855 [published: FIPS 180-4 examples].
	if got := hex.EncodeToString(empty[:]); got != "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855" {
		t.Errorf("empty root = %s", got)
	}
	for i, l := range leaves {
		if _, err := b.Append(mustHex(t, l)); err != nil {
			t.Fatal(err)
		}
		root, err := b.Root()
		if err != nil {
			t.Fatal(err)
		}
		if got := hex.EncodeToString(root[:]); got != roots[i] {
			t.Errorf("root of %d leaves = %s, want %s", i+1, got, roots[i])
		}
	}
}

// memHashes is a complete stored-hash table in memory, for comparing a TreeBuilder
// with tlog over full storage.
type memHashes []tlog.Hash

func (m memHashes) ReadHashes(idx []int64) ([]tlog.Hash, error) {
	out := make([]tlog.Hash, len(idx))
	for k, i := range idx {
		out[k] = m[i]
	}
	return out, nil
}

// TestTreeBuilderMatchesFullStorage checks, for every size up to 300, that the
// builder's edge-only hashes equal tlog.StoredHashes over the full table, that a
// builder resumed from the table continues identically, and that proofs made from
// the table check against the builder's roots and fail for another leaf.
func TestTreeBuilderMatchesFullStorage(t *testing.T) {
	b := provenance.NewTreeBuilder()
	var full memHashes
	var roots []tlog.Hash
	for n := int64(0); n < 300; n++ {
		leaf := []byte{byte(n), byte(n >> 8), 'x'}
		want, err := tlog.StoredHashes(n, leaf, full)
		if err != nil {
			t.Fatal(err)
		}
		got, err := b.Append(leaf)
		if err != nil {
			t.Fatal(err)
		}
		if len(got) != len(want) || int64(len(full)) != tlog.StoredHashIndex(0, n) {
			t.Fatalf("leaf %d: %d hashes, want %d", n, len(got), len(want))
		}
		for k := range want {
			if got[k] != want[k] {
				t.Fatalf("leaf %d: hash %d differs", n, k)
			}
		}
		full = append(full, want...)
		root, err := b.Root()
		if err != nil {
			t.Fatal(err)
		}
		if th, _ := tlog.TreeHash(n+1, full); th != root {
			t.Fatalf("root of %d differs from tlog.TreeHash", n+1)
		}
		roots = append(roots, root)
	}
	for _, size := range []int64{1, 2, 7, 64, 100, 255} {
		r, err := provenance.ResumeTreeBuilder(size, full)
		if err != nil {
			t.Fatal(err)
		}
		hs, err := r.Append([]byte{byte(size), byte(size >> 8), 'x'})
		if err != nil || hs[0] != full[tlog.StoredHashIndex(0, size)] {
			t.Fatalf("resumed at %d: %v", size, err)
		}
		if root, _ := r.Root(); root != roots[size] {
			t.Errorf("resumed at %d: root differs", size)
		}
	}
	for _, c := range [][2]int64{{0, 1}, {5, 6}, {5, 300}, {128, 129}, {299, 300}} {
		index, size := c[0], c[1]
		proof, err := tlog.ProveRecord(size, index, full)
		if err != nil {
			t.Fatal(err)
		}
		p := provenance.InclusionProof{Index: index, Size: size, LeafHash: full[tlog.StoredHashIndex(0, index)], Root: roots[size-1], Proof: proof}
		if err := p.Check(); err != nil {
			t.Errorf("inclusion of %d in %d: %v", index, size, err)
		}
		p.LeafHash = tlog.RecordHash([]byte("not the leaf"))
		if p.Check() == nil {
			t.Errorf("inclusion of %d in %d passed for another leaf", index, size)
		}
	}
	for _, c := range [][2]int64{{1, 2}, {3, 7}, {64, 65}, {100, 300}, {300, 300}} {
		from, to := c[0], c[1]
		proof, err := tlog.ProveTree(to, from, full)
		if err != nil {
			t.Fatal(err)
		}
		p := provenance.ConsistencyProof{From: from, To: to, FromRoot: roots[from-1], ToRoot: roots[to-1], Proof: proof}
		if err := p.Check(); err != nil {
			t.Errorf("consistency %d→%d: %v", from, to, err)
		}
		p.FromRoot = roots[0]
		if from != 1 && p.Check() == nil {
			t.Errorf("consistency %d→%d passed with another old root", from, to)
		}
	}
}

// TestLedgerEventCanonical checks the leaf is RFC 8785 JSON, that the state is
// canonicalised the way the RFC's own example is, and that ParseLeaf refuses any
// other spelling of the same event.
func TestLedgerEventCanonical(t *testing.T) {
	// [published: RFC 8785 §3.2.2 and §3.2.3] the specification's example input and
	// its canonical form.
	input := `{
  "numbers": [333333333.33333329, 1E30, 4.50, 2e-3, 0.000000000000000000000000001],
  "string": "\u20ac$\u000F\u000aA'\u0042\u0022\u005c\\\"\/",
  "literals": [null, true, false]
}`
	want := `{"literals":[null,true,false],"numbers":[333333333.3333333,1e+30,4.5,0.002,1e-27],"string":"€$\u000f\nA'B\"\\\\\"/"}`
	at := time.Date(2031, 3, 14, 9, 26, 53, 589793238, time.FixedZone("CET", 3600))
	ev, err := provenance.NewLedgerEvent("user-1", provenance.ActionCreate, provenance.EntitySpecimen, "sp-1", at, json.RawMessage(input))
	if err != nil {
		t.Fatal(err)
	}
	if string(ev.State) != want {
		t.Errorf("state = %s\nwant    %s", ev.State, want)
	}
	wantLeaf := `{"action":"create","actor":"user-1","at":"2031-03-14T08:26:53.589793Z","entity_id":"sp-1","entity_type":"specimen","state":` + want + `,"v":1}`
	if string(ev.Leaf) != wantLeaf {
		t.Errorf("leaf = %s\nwant   %s", ev.Leaf, wantLeaf)
	}
	if !ev.At.Equal(at.Truncate(time.Microsecond)) {
		t.Errorf("at = %v", ev.At)
	}
	back, err := provenance.ParseLeaf(ev.Leaf)
	if err != nil || !back.SameFields(ev) {
		t.Fatalf("ParseLeaf = %+v, %v", back, err)
	}
	for name, leaf := range map[string]string{
		"spaces":          strings.Replace(wantLeaf, `"action":`, `"action": `, 1),
		"unsorted":        `{"actor":"user-1","action":"create"` + wantLeaf[len(`{"action":"create","actor":"user-1"`):],
		"extra member":    strings.Replace(wantLeaf, `"state"`, `"sneaky":1,"state"`, 1),
		"other format":    strings.Replace(wantLeaf, `"v":1`, `"v":2`, 1),
		"time without µs": strings.Replace(wantLeaf, `53.589793Z`, `53Z`, 1),
	} {
		if _, err := provenance.ParseLeaf([]byte(leaf)); err == nil {
			t.Errorf("%s: ParseLeaf accepted %s", name, leaf)
		}
	}
	other := ev
	other.Actor = "user-2"
	if ev.SameFields(other) {
		t.Error("SameFields ignores the actor")
	}
	if _, err := provenance.NewLedgerEvent("", "create", "specimen", "x", at, nil); err == nil {
		t.Error("an event without actor was built")
	}
}

// TestLedgerEventOwnCanonicalState checks that a state writing its own canonical JSON
// (a statement record) gives the very leaf the general way gives, and that a state the
// own writer declines (an amount beyond 2^53) still gets the general way's leaf.
func TestLedgerEventOwnCanonicalState(t *testing.T) {
	at := time.Date(2031, 4, 1, 6, 0, 0, 0, time.UTC)
	start := at.AddDate(0, -1, 0)
	rec := scheduling.StatementRecord{ID: "st-1", ProjectID: "p-1", Currency: "EUR", PeriodStart: start, PeriodEnd: at,
		Status: scheduling.StatementDraft, TotalMinor: 12000,
		Lines: []scheduling.StatementLine{{LineNo: 1, BookingID: "b-1", InstrumentID: "i-1", BookingKind: scheduling.KindIndependent,
			BookingStart: &start, Component: scheduling.ComponentInstrumentTime, Rule: "greater_of_booked_and_used", Minutes: 60,
			HourlyRateMinor: 12000, AmountMinor: 12000, Reason: "tab\tand \"quotes\" é",
			Allocations: []scheduling.Allocation{{AccountID: "a-1", AmountMinor: 12000}}}},
		AccountTotals: []scheduling.Allocation{{AccountID: "a-1", AmountMinor: 12000}}}
	for name, rec := range map[string]scheduling.StatementRecord{
		"own writer":   rec,
		"general only": func() scheduling.StatementRecord { r := rec; r.TotalMinor = 1<<53 + 1; return r }(),
	} {
		if _, ok := any(rec).(provenance.CanonicalState); !ok {
			t.Fatal("a statement record does not write its own canonical JSON")
		}
		ev, err := provenance.NewLedgerEvent("m-1", provenance.ActionCreate, provenance.EntityStatement, rec.ID, at, rec)
		if err != nil {
			t.Fatal(err)
		}
		raw, err := json.Marshal(rec)
		if err != nil {
			t.Fatal(err)
		}
		// [computed] the general way: the record's encoding/json bytes as a raw state.
		general, err := provenance.NewLedgerEvent("m-1", provenance.ActionCreate, provenance.EntityStatement, rec.ID, at, json.RawMessage(raw))
		if err != nil || !bytes.Equal(ev.Leaf, general.Leaf) {
			t.Errorf("%s: leaf\n%s\nwant\n%s (%v)", name, ev.Leaf, general.Leaf, err)
		}
	}
}

// TestMatchesLeaf checks the audit's quick comparison of a row with its leaf: it
// must agree with the full canonical encoding for every string, and refuse a row
// whose columns were edited without the leaf.
func TestMatchesLeaf(t *testing.T) {
	at := time.Date(2031, 3, 14, 9, 26, 53, 589793238, time.UTC)
	// [computed: github.com/gowebpki/jcs, the RFC 8785 encoding NewLedgerEvent uses]
	// strings with every kind of escape RFC 8785 §3.2.2.2 names, and characters it
	// leaves alone (non-ASCII, U+2028, DEL, '/').
	odd := "q\"b\\s\b\t\n\f\r\x01\x1f\x7f/é€\u2028"
	for _, actor := range []string{"user-1", "agent:tok-9", odd} {
		ev, err := provenance.NewLedgerEvent(actor, provenance.ActionCorrect, provenance.EntitySpecimen, odd+"-id", at, map[string]any{"k": odd})
		if err != nil {
			t.Fatal(err)
		}
		// The leaf must be what the general RFC 8785 encoder makes of the whole event.
		plain, _ := json.Marshal(map[string]any{"v": 1, "action": ev.Action, "actor": actor, "at": "2031-03-14T09:26:53.589793Z",
			"entity_id": odd + "-id", "entity_type": "specimen", "state": map[string]any{"k": odd}})
		if want, err := jcs.Transform(plain); err != nil || !bytes.Equal(ev.Leaf, want) {
			t.Errorf("actor %q: leaf %s\nwant %s (%v)", actor, ev.Leaf, want, err)
		}
		if back, err := provenance.ParseLeaf(ev.Leaf); err != nil || !back.SameFields(ev) {
			t.Errorf("actor %q: ParseLeaf = %+v, %v", actor, back, err)
		}
		if ok, _ := ev.MatchesLeaf(nil); !ok {
			t.Errorf("actor %q: an event built by NewLedgerEvent does not match its own leaf %s", actor, ev.Leaf)
		}
		for name, edit := range map[string]func(*provenance.LedgerEvent){
			"actor":       func(e *provenance.LedgerEvent) { e.Actor += "x" },
			"time":        func(e *provenance.LedgerEvent) { e.At = e.At.Add(time.Microsecond) },
			"action":      func(e *provenance.LedgerEvent) { e.Action = provenance.ActionCreate },
			"entity type": func(e *provenance.LedgerEvent) { e.EntityType = provenance.EntityTuning },
			"entity id":   func(e *provenance.LedgerEvent) { e.EntityID = "other" },
			"state": func(e *provenance.LedgerEvent) {
				e.Leaf = []byte(strings.Replace(string(e.Leaf), `"state":{`, `"state":{{`, 1))
			},
		} {
			e := ev
			edit(&e)
			if ok, _ := e.MatchesLeaf(nil); ok {
				t.Errorf("actor %q: a row with its %s edited matches the leaf", actor, name)
			}
		}
	}
}

// rfc8032Test1 is the key of RFC 8032 §7.1 test 1. It is public: tests only.
func rfc8032Test1(t *testing.T) ed25519.PrivateKey {
	// [published: RFC 8032 §7.1 test 1] secret key.
	return ed25519.NewKeyFromSeed(mustHex(t, "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"))
}

// TestCheckpointSignerRFC8032 checks the conversion of a raw Ed25519 key into the
// note package's signer and verifier keeps the key: the verifier key carries the
// published public key and accepts the published signature.
func TestCheckpointSignerRFC8032(t *testing.T) {
	s, err := provenance.NewCheckpointSigner("ledger.test.example", rfc8032Test1(t))
	if err != nil {
		t.Fatal(err)
	}
	parts := strings.SplitN(s.VerifierKey(), "+", 3)
	if len(parts) != 3 || parts[0] != "ledger.test.example" {
		t.Fatalf("verifier key %q", s.VerifierKey())
	}
	raw, err := base64.StdEncoding.DecodeString(parts[2])
	if err != nil || len(raw) != 33 || raw[0] != 1 {
		t.Fatalf("verifier key body %x", raw)
	}
	// [published: RFC 8032 §7.1 test 1] public key, and the signature of the empty
	// message.
	if got := hex.EncodeToString(raw[1:]); got != "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a" {
		t.Errorf("public key %s", got)
	}
	sig := mustHex(t, "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b")
	v, err := provenance.ParseVerifierKey(s.VerifierKey())
	if err != nil {
		t.Fatal(err)
	}
	if !v.Verify(nil, sig) {
		t.Error("the verifier refuses the published signature")
	}
	if v.Verify([]byte("x"), sig) {
		t.Error("the verifier accepts the signature for another message")
	}
}

// TestCheckpointFormat checks the C2SP tlog-checkpoint text, its signature, and that
// an edited checkpoint, another key and another origin are refused.
func TestCheckpointFormat(t *testing.T) {
	_, key, _ := ed25519.GenerateKey(nil)
	s, err := provenance.NewCheckpointSigner("ledger.test.example", key)
	if err != nil {
		t.Fatal(err)
	}
	root := tlog.RecordHash([]byte("root"))
	now := time.Date(2031, 1, 2, 3, 4, 5, 0, time.UTC)
	cp, err := s.Sign(42, root, now)
	if err != nil {
		t.Fatal(err)
	}
	body := "ledger.test.example\n42\n" + root.String() + "\n"
	if !strings.HasPrefix(cp.Note, body+"\n— ledger.test.example ") || !strings.HasSuffix(cp.Note, "\n") {
		t.Fatalf("note:\n%s", cp.Note)
	}
	got, err := provenance.OpenCheckpoint([]byte(cp.Note), s.Verifier())
	if err != nil || got.Size != 42 || got.Root != root || got.Origin != "ledger.test.example" {
		t.Fatalf("OpenCheckpoint = %+v, %v", got, err)
	}
	if _, err := provenance.OpenCheckpoint([]byte(strings.Replace(cp.Note, "\n42\n", "\n43\n", 1)), s.Verifier()); err == nil {
		t.Error("an edited size passed")
	}
	_, key2, _ := ed25519.GenerateKey(nil)
	s2, _ := provenance.NewCheckpointSigner("ledger.test.example", key2)
	if _, err := provenance.OpenCheckpoint([]byte(cp.Note), s2.Verifier()); err == nil {
		t.Error("another key's verifier accepted it")
	}
	s3, _ := provenance.NewCheckpointSigner("other.test.example", key)
	cp3, _ := s3.Sign(42, root, now)
	if _, err := provenance.OpenCheckpoint([]byte(cp3.Note), s.Verifier()); err == nil {
		t.Error("a checkpoint of another origin passed")
	}
	for _, bad := range []string{"", "a b", "a+b"} {
		if _, err := provenance.NewCheckpointSigner(bad, key); err == nil {
			t.Errorf("origin %q accepted", bad)
		}
	}
	for _, text := range []string{"o\n042\n" + root.String() + "\n", "o\n-1\n" + root.String() + "\n", "o\n1\nnot-base64\n", "o\n1\n"} {
		if _, _, _, err := provenance.ParseCheckpointBody(text); err == nil {
			t.Errorf("ParseCheckpointBody accepted %q", text)
		}
	}
	if o, n, r, err := provenance.ParseCheckpointBody(body + "extension line\n"); err != nil || o != "ledger.test.example" || n != 42 || r != root {
		t.Errorf("with an extension line: %v", err)
	}
	if !bytes.HasPrefix([]byte(cp.Note), []byte(provenance.CheckpointBody("ledger.test.example", 42, root))) {
		t.Error("CheckpointBody differs from the signed text")
	}
}

// TestStateDigest checks that a state's digest is the SHA-256 of the state an event
// for it holds, by its own writer and by the general way.
func TestStateDigest(t *testing.T) {
	at := time.Date(2031, 4, 1, 6, 0, 0, 0, time.UTC)
	for name, state := range map[string]any{
		"record":      scheduling.StatementRecord{ID: "st-1", Currency: "EUR", PeriodStart: at, PeriodEnd: at, TotalMinor: 5},
		"record, big": scheduling.StatementRecord{ID: "st-1", Currency: "EUR", PeriodStart: at, PeriodEnd: at, TotalMinor: 1<<53 + 1},
		"map":         map[string]any{"b": 1, "a": "x"},
	} {
		ev, err := provenance.NewLedgerEvent("m-1", provenance.ActionCreate, provenance.EntityStatement, "st-1", at, state)
		if err != nil {
			t.Fatal(err)
		}
		got, err := provenance.StateDigest(state)
		// [computed] crypto/sha256 over the event's state bytes.
		if want := sha256.Sum256(ev.State); err != nil || got != want {
			t.Errorf("%s: digest %x, want %x (%v)", name, got, want, err)
		}
	}
}
