package postgres_test

import (
	"context"
	"crypto/sha256"
	"fmt"
	"math/rand/v2"
	"os"
	"slices"
	"strconv"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/provenance"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// benchLedgerEvents is the ledger's length in the ledger benchmark;
// BEAMLEDGER_BENCH_LEDGER_EVENTS overrides it for a quick try.
func benchLedgerEvents(b *testing.B) int {
	n := 1_000_000
	if v := os.Getenv("BEAMLEDGER_BENCH_LEDGER_EVENTS"); v != "" {
		var err error
		if n, err = strconv.Atoi(v); err != nil || n < 1 {
			b.Fatalf("BEAMLEDGER_BENCH_LEDGER_EVENTS=%q", v)
		}
	}
	return n
}

// fillLedger writes n events shaped like the facility's own (a specimen's state,
// about 400 canonical bytes each) with COPY and seals them, signing a checkpoint
// every 100,000 events, as a sealer running through a year would.
func fillLedger(b *testing.B, ctx context.Context, db *postgres.DB, url string, s *provenance.CheckpointSigner, n int) {
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	defer conn.Close(ctx)
	t0 := time.Date(2026, 1, 5, 8, 0, 0, 0, time.UTC)
	const chunk = 100_000
	for from := 0; from < n; from += chunk {
		rows := make([][]any, 0, min(chunk, n-from))
		for i := from; i < min(from+chunk, n); i++ {
			at := t0.Add(time.Duration(i) * 31 * time.Second)
			id := fmt.Sprintf("00000000-0000-4000-8000-%012d", i)
			ev, err := provenance.NewLedgerEvent("7d3f1c2a-5b6e-4f80-9a1b-2c3d4e5f6a7b", provenance.ActionCreate, "specimen", id, at,
				map[string]any{"id": id, "project_id": "1b2c3d4e-5f60-4718-8a9b-0c1d2e3f4a5b", "code": fmt.Sprintf("LAM-%07d", i),
					"description": "lamella cut by focused ion beam, 80 nm, on a copper half-grid", "fluence_budget_e_per_angstrom2": 40,
					"created_by": "7d3f1c2a-5b6e-4f80-9a1b-2c3d4e5f6a7b", "created_at": at.Format(time.RFC3339Nano)})
			if err != nil {
				b.Fatal(err)
			}
			rows = append(rows, []any{ev.Actor, ev.At, ev.Action, ev.EntityType, ev.EntityID, ev.Leaf})
		}
		if _, err := conn.CopyFrom(ctx, pgx.Identifier{"ledger_events"}, []string{"actor", "at", "action", "entity_type", "entity_id", "leaf"},
			pgx.CopyFromRows(rows)); err != nil {
			b.Fatal(err)
		}
		if _, err := db.SealLedger(ctx, s, t0.Add(time.Duration(from+len(rows))*31*time.Second)); err != nil {
			b.Fatal(err)
		}
	}
	for _, table := range []string{"ledger_events", "ledger_hashes"} {
		if _, err := conn.Exec(ctx, `VACUUM ANALYZE `+table); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkLedger measures, over one ledger of a million events in one PostgreSQL:
//
//   - verify: `ledger verify`'s whole audit (every event re-hashed and parsed, the
//     tree recomputed and compared with every stored hash, tree head and signed
//     checkpoint), against two anchors measured in the same run: sha256_stream, the
//     same canonical bytes read from the database in index order and hashed in one
//     pass, and sha256_memory, those bytes hashed from memory. Compare ns/op.
//   - inclusion_proof: proofsPerOp inclusion proofs, each for a random event
//     against the newest tree, as the proof endpoint asks storage for them; p50/p99
//     of one proof in milliseconds.
//
// Run with `make bench-ledger` (about five minutes, most of it writing and sealing
// the events).
func BenchmarkLedger(b *testing.B) {
	const proofsPerOp = 2000
	ctx := context.Background()
	url := pgtest.NewDatabase(b)
	db, err := postgres.Open(ctx, url, 4)
	if err != nil {
		b.Fatal(err)
	}
	defer db.Close()
	s := newLedgerSigner(b)
	n := benchLedgerEvents(b)
	fillLedger(b, ctx, db, url, s, n)
	head, err := db.LedgerHead(ctx)
	if err != nil || head.Size != int64(n) {
		b.Fatalf("head %+v, %v", head, err)
	}

	b.Run("sha256_stream", func(b *testing.B) {
		conn, err := pgx.Connect(ctx, url)
		if err != nil {
			b.Fatal(err)
		}
		defer conn.Close(ctx)
		for b.Loop() {
			h := sha256.New()
			var bytes int64
			rows, _ := conn.Query(ctx, `SELECT leaf FROM ledger_events WHERE idx IS NOT NULL ORDER BY idx`)
			var leaf []byte
			_, err := pgx.ForEachRow(rows, []any{&leaf}, func() error {
				h.Write(leaf)
				bytes += int64(len(leaf))
				return nil
			})
			if err != nil {
				b.Fatal(err)
			}
			b.SetBytes(bytes)
		}
	})
	b.Run("sha256_memory", func(b *testing.B) {
		conn, err := pgx.Connect(ctx, url)
		if err != nil {
			b.Fatal(err)
		}
		defer conn.Close(ctx)
		rows, _ := conn.Query(ctx, `SELECT leaf FROM ledger_events WHERE idx IS NOT NULL ORDER BY idx`)
		leaves, err := pgx.CollectRows(rows, pgx.RowTo[[]byte])
		if err != nil {
			b.Fatal(err)
		}
		var bytes int64
		for _, l := range leaves {
			bytes += int64(len(l))
		}
		b.SetBytes(bytes)
		for b.Loop() {
			h := sha256.New()
			for _, l := range leaves {
				h.Write(l)
			}
			_ = h.Sum(nil)
		}
	})
	b.Run("verify", func(b *testing.B) {
		for b.Loop() {
			rep, err := db.AuditLedger(ctx, s.Verifier())
			if err != nil || rep.Fault != nil || rep.Events != int64(n) {
				b.Fatalf("audit: %+v, %v", rep, err)
			}
		}
	})
	b.Run("inclusion_proof", func(b *testing.B) {
		r := rand.New(rand.NewPCG(1, 2))
		var lat []time.Duration
		for b.Loop() {
			for range proofsPerOp {
				i := r.Int64N(head.Size)
				t0 := time.Now()
				p, err := db.InclusionProof(ctx, i, head.Size)
				lat = append(lat, time.Since(t0))
				if err != nil || p.Root != head.Root || p.Check() != nil {
					b.Fatalf("proof %d: %v", i, err)
				}
			}
		}
		slices.Sort(lat)
		pct := func(p float64) float64 {
			return float64(lat[int(p*float64(len(lat)-1))]) / float64(time.Millisecond)
		}
		b.ReportMetric(pct(0.50), "p50-ms")
		b.ReportMetric(pct(0.99), "p99-ms")
	})
}
