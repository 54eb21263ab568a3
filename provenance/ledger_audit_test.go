package provenance_test

import (
	"crypto/ed25519"
	"errors"
	"fmt"
	"iter"
	"slices"
	"strings"
	"testing"
	"time"

	"golang.org/x/mod/sumdb/tlog"

	"beamledger/provenance"
)

// memLedger is a ledger's tables in memory, as a sealer would leave them.
type memLedger struct {
	events      []provenance.LedgerEvent
	hashes      []provenance.StoredHash
	heads       []provenance.TreeHead
	checkpoints []provenance.Checkpoint
}

func seq[T any](xs []T) iter.Seq2[T, error] {
	return func(yield func(T, error) bool) {
		for _, x := range xs {
			if !yield(x, nil) {
				return
			}
		}
	}
}

func (m memLedger) source() provenance.LedgerSource {
	return provenance.LedgerSource{Events: seq(m.events), Hashes: seq(m.hashes), Heads: seq(m.heads), Checkpoints: seq(m.checkpoints)}
}

func (m memLedger) clone() memLedger {
	c := memLedger{events: slices.Clone(m.events), hashes: slices.Clone(m.hashes), heads: slices.Clone(m.heads),
		checkpoints: slices.Clone(m.checkpoints)}
	for i := range c.events {
		idx := *c.events[i].Index
		c.events[i].Index = &idx
	}
	return c
}

// buildLedger seals n events in seals of the given sizes, signing a checkpoint after
// each seal.
func buildLedger(t *testing.T, s *provenance.CheckpointSigner, n int, sealEvery int) memLedger {
	t.Helper()
	var m memLedger
	b := provenance.NewTreeBuilder()
	at := time.Date(2031, 1, 1, 0, 0, 0, 0, time.UTC)
	for i := 0; i < n; i++ {
		ev, err := provenance.NewLedgerEvent("user-1", provenance.ActionCreate, provenance.EntitySpecimen, fmt.Sprintf("sp-%d", i),
			at.Add(time.Duration(i)*time.Second), map[string]any{"code": fmt.Sprintf("S%d", i)})
		if err != nil {
			t.Fatal(err)
		}
		idx := int64(i)
		ev.Index = &idx
		hs, err := b.Append(ev.Leaf)
		if err != nil {
			t.Fatal(err)
		}
		for k, h := range hs {
			m.hashes = append(m.hashes, provenance.StoredHash{Index: tlog.StoredHashIndex(0, idx) + int64(k), Hash: h})
		}
		m.events = append(m.events, ev)
		if (i+1)%sealEvery == 0 || i == n-1 {
			root, _ := b.Root()
			m.heads = append(m.heads, provenance.TreeHead{Size: b.Size(), Root: root})
			cp, err := s.Sign(b.Size(), root, at)
			if err != nil {
				t.Fatal(err)
			}
			m.checkpoints = append(m.checkpoints, cp)
		}
	}
	return m
}

// rehash rewrites every stored hash and tree head from the events as they now are,
// as someone able to write the tables could; only the checkpoints' signatures are
// beyond them.
func rehash(t *testing.T, m *memLedger) {
	t.Helper()
	b := provenance.NewTreeBuilder()
	m.hashes = nil
	heads := map[int64]bool{}
	for _, h := range m.heads {
		heads[h.Size] = true
	}
	m.heads = nil
	for _, ev := range m.events {
		hs, err := b.Append(ev.Leaf)
		if err != nil {
			t.Fatal(err)
		}
		for k, h := range hs {
			m.hashes = append(m.hashes, provenance.StoredHash{Index: tlog.StoredHashIndex(0, b.Size()-1) + int64(k), Hash: h})
		}
		if heads[b.Size()] {
			root, _ := b.Root()
			m.heads = append(m.heads, provenance.TreeHead{Size: b.Size(), Root: root})
		}
	}
}

// TestAuditLedgerCatchesTampering edits, deletes, reorders and inserts events, stored
// hashes, heads and checkpoints in a ledger of 40 events sealed 7 at a time, and
// expects each to be caught at the right index.
func TestAuditLedgerCatchesTampering(t *testing.T) {
	_, key, _ := ed25519.GenerateKey(nil)
	s, err := provenance.NewCheckpointSigner("ledger.test.example", key)
	if err != nil {
		t.Fatal(err)
	}
	good := buildLedger(t, s, 40, 7)
	rep, err := provenance.AuditLedger(good.source(), s.Verifier())
	if err != nil || rep.Fault != nil {
		t.Fatalf("intact ledger: %v, %v", rep.Fault, err)
	}
	if rep.Events != 40 || rep.Heads != 6 || rep.Checkpoints != 6 || rep.Root != good.heads[5].Root {
		t.Fatalf("intact ledger report %+v", rep)
	}
	forged, err := provenance.NewLedgerEvent("user-9", provenance.ActionCreate, provenance.EntitySpecimen, "sp-forged",
		time.Date(2031, 1, 1, 0, 0, 0, 0, time.UTC), map[string]any{"code": "FORGED"})
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name   string
		tamper func(m *memLedger)
		// index is the first bad event expected; problem a part of the message.
		index   int64
		problem string
	}{
		{"leaf edited", func(m *memLedger) {
			e := &m.events[12]
			e.Leaf = []byte(strings.Replace(string(e.Leaf), `"S12"`, `"S99"`, 1))
		}, 12, "leaf hash differs"},
		{"actor column edited", func(m *memLedger) { m.events[3].Actor = "user-2" }, 3, "differ from its canonical bytes"},
		{"event deleted", func(m *memLedger) { m.events = slices.Delete(m.events, 20, 21) }, 20, "missing"},
		{"last event deleted", func(m *memLedger) { m.events = m.events[:39] }, 39, "deleted from the end"},
		{"events swapped", func(m *memLedger) {
			m.events[5].Leaf, m.events[9].Leaf = m.events[9].Leaf, m.events[5].Leaf
			m.events[5].EntityID, m.events[9].EntityID = m.events[9].EntityID, m.events[5].EntityID
			m.events[5].At, m.events[9].At = m.events[9].At, m.events[5].At
		}, 5, "leaf hash differs"},
		{"indexes swapped", func(m *memLedger) {
			*m.events[5].Index, *m.events[9].Index = 9, 5
			slices.SortFunc(m.events, func(a, b provenance.LedgerEvent) int { return int(*a.Index - *b.Index) })
		}, 5, "leaf hash differs"},
		{"event inserted in the middle", func(m *memLedger) {
			ev := forged
			m.events = slices.Insert(m.events, 30, ev)
			for i := range m.events {
				idx := int64(i)
				m.events[i].Index = &idx
			}
		}, 30, "leaf hash differs"},
		{"event appended with its hashes", func(m *memLedger) {
			ev := forged
			idx := int64(40)
			ev.Index = &idx
			m.events = append(m.events, ev)
			rehash(t, m)
		}, 40, "no sealed tree head"},
		{"event appended without hashes", func(m *memLedger) {
			ev := forged
			idx := int64(40)
			ev.Index = &idx
			m.events = append(m.events, ev)
		}, 40, "no stored hash"},
		{"leaf edited and every hash rewritten", func(m *memLedger) {
			e := &m.events[12]
			e.Leaf = []byte(strings.Replace(string(e.Leaf), `"S12"`, `"S99"`, 1))
			rehash(t, m)
		}, 7, "signed root differs"},
		{"subtree hash edited", func(m *memLedger) { m.hashes[len(m.hashes)-2].Hash[0] ^= 1 }, 39, "subtree hash"},
		{"tree head root edited", func(m *memLedger) { m.heads[2].Root[0] ^= 1 }, 14, "tree head's root differs"},
		{"checkpoint row size edited", func(m *memLedger) { m.checkpoints[1].Root[0] ^= 1 }, -1, "differ from its signed text"},
		{"checkpoint note edited", func(m *memLedger) {
			m.checkpoints[1].Note = strings.Replace(m.checkpoints[1].Note, "\n14\n", "\n15\n", 1)
		}, -1, "signature"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m := good.clone()
			tc.tamper(&m)
			rep, err := provenance.AuditLedger(m.source(), s.Verifier())
			if err != nil {
				t.Fatal(err)
			}
			if rep.Fault == nil {
				t.Fatal("not caught")
			}
			if rep.Fault.Index != tc.index || !strings.Contains(rep.Fault.Problem, tc.problem) {
				t.Fatalf("fault %v (index %d), want index %d and %q", rep.Fault, rep.Fault.Index, tc.index, tc.problem)
			}
		})
	}
	other, _ := provenance.NewCheckpointSigner("ledger.test.example", ed25519.NewKeyFromSeed(make([]byte, 32)))
	if rep, _ := provenance.AuditLedger(good.source(), other.Verifier()); rep.Fault == nil || rep.Fault.Index != -1 {
		t.Errorf("checkpoints checked with another key: %+v", rep.Fault)
	}
}

// TestAuditLedgerSourceError checks a source that fails is an error, not a finding.
func TestAuditLedgerSourceError(t *testing.T) {
	_, key, _ := ed25519.GenerateKey(nil)
	s, _ := provenance.NewCheckpointSigner("ledger.test.example", key)
	m := buildLedger(t, s, 5, 5)
	src := m.source()
	boom := errors.New("connection lost")
	src.Hashes = func(yield func(provenance.StoredHash, error) bool) { yield(provenance.StoredHash{}, boom) }
	if _, err := provenance.AuditLedger(src, s.Verifier()); !errors.Is(err, boom) {
		t.Fatalf("err = %v, want the source's", err)
	}
}
