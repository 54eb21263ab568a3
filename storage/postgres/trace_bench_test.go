package postgres_test

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"math/rand/v2"
	"os"
	"slices"
	"strconv"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// BenchmarkTraceByDigest times an auditor's lookup: from a SHA-256 to the whole trace
// (the records of the digest through the partial index, then the trace with its
// ledger events proved against the latest checkpoint) among BEAMLEDGER_BENCH_TRACE_FILES
// stored files (1,000,000 unless set), each with its ledger event, all sealed under
// one checkpoint. One file in ten belongs to an acquisition, whose trace also reads
// the acquisition, its versions, booking, instrument, specimen and people. Digests are
// drawn at random, so most reads miss the cache as an auditor's would. Reports the
// p50 and p99 of one lookup.
//
//	go run ./deploy/testenv -- go test -run '^$' -bench TraceByDigest -benchtime 2000x ./storage/postgres/
func BenchmarkTraceByDigest(b *testing.B) {
	n := 1_000_000
	if v, err := strconv.Atoi(os.Getenv("BEAMLEDGER_BENCH_TRACE_FILES")); err == nil && v > 0 {
		n = v
	}
	ctx := context.Background()
	url := pgtest.NewDatabase(b)
	db, err := postgres.Open(ctx, url, 8)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(db.Close)
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { conn.Close(context.Background()) })
	setupStart := time.Now()
	seedTraceFiles(b, db, conn, n)
	b.Logf("%d files with sealed events in %s", n, time.Since(setupStart).Round(time.Second))

	rng := rand.New(rand.NewPCG(1, 2))
	lookup := func() time.Duration {
		sum := sha256.Sum256([]byte("bench-" + strconv.Itoa(1+rng.IntN(n))))
		start := time.Now()
		fs, err := db.FilesByDigest(ctx, hex.EncodeToString(sum[:]), nil)
		if err != nil || len(fs) != 1 {
			b.Fatalf("records: %v %v", fs, err)
		}
		tr, err := db.Trace(ctx, fs[0].ID)
		if err != nil || len(tr.Ledger.Records) == 0 || !tr.Ledger.Records[0].Events[0].Sealed {
			b.Fatalf("trace: %v", err)
		}
		return time.Since(start)
	}
	// Unmeasured lookups first, so that pooled connections have planned their
	// statements: a cold start is not the path measured.
	for range 64 {
		lookup()
	}
	lat := make([]time.Duration, 0, b.N)
	b.ResetTimer()
	for b.Loop() {
		lat = append(lat, lookup())
	}
	b.StopTimer()
	slices.Sort(lat)
	ms := func(q float64) float64 { return float64(lat[int(q*float64(len(lat)-1))]) / 1e6 }
	b.ReportMetric(ms(0.5), "p50-ms")
	b.ReportMetric(ms(0.99), "p99-ms")
}

// seedTraceFiles makes n stored files, one in ten on an acquisition, with their
// ledger events (RFC 8785 canonical leaves written by SQL) and seals them.
func seedTraceFiles(b *testing.B, db *postgres.DB, conn *pgx.Conn, n int) {
	b.Helper()
	ctx := context.Background()
	user, err := db.CreateUser(ctx, accounts.NewUser{Email: "bench@example.org", DisplayName: "Bench", Role: accounts.RoleResearcher}, "hash")
	if err != nil {
		b.Fatal(err)
	}
	project, err := db.CreateProject(ctx, accounts.NewProject{Code: "BENCH-1", Title: "Bench", PrincipalInvestigatorID: user.ID, RateClass: accounts.RateInternal})
	if err != nil {
		b.Fatal(err)
	}
	inst, err := db.CreateInstrument(ctx, scheduling.Instrument{Code: "STEM-B", Name: "Bench STEM", Kind: scheduling.KindSTEM, Bookable: true,
		AcceleratingVoltagesV: []float64{300e3}, Corrector: scheduling.CorrectorProbe}, "setup", time.Now())
	if err != nil {
		b.Fatal(err)
	}
	start := t0.Add(-4 * time.Hour).Truncate(time.Hour)
	if err := db.InsertBookingRow(ctx, scheduling.NewBooking{InstrumentID: inst.ID, ProjectID: project.ID, UserID: user.ID,
		Kind: scheduling.KindIndependent, Start: start, End: start.Add(3 * time.Hour), Actor: user.ID}); err != nil {
		b.Fatal(err)
	}
	bs, err := db.Bookings(ctx, scheduling.BookingFilter{InstrumentID: inst.ID, From: start, To: start.Add(time.Hour)})
	if err != nil || len(bs) != 1 {
		b.Fatalf("booking: %v %v", bs, err)
	}
	sp, err := db.CreateSpecimen(ctx, provenance.NewSpecimen{ProjectID: project.ID, Code: "B-1", CreatedBy: user.ID}, t0)
	if err != nil {
		b.Fatal(err)
	}
	a, err := db.CreateAcquisition(ctx, provenance.NewAcquisition{Input: provenance.AcquisitionInput{BookingID: bs[0].ID, SpecimenID: sp.ID, StartedAt: start},
		VoltageV: 300e3, Actor: user.ID, Now: t0}, func(ac provenance.AcquisitionContext) (provenance.Draft, error) {
		f := 12.5
		return provenance.Draft{AcquisitionVersion: provenance.AcquisitionVersion{OperatorID: ac.Operator.ID, SpecimenID: &sp.ID,
			StartedAt: start.Add(10 * time.Minute), EndedAt: start.Add(20 * time.Minute), Conditions: json.RawMessage(`{"accelerating_voltage":{"si":300000}}`),
			Derived: json.RawMessage(`{}`), FluenceEPerA2: &f, CalibrationIDs: []string{}, Applied: []provenance.Applied{}, Warnings: []string{}, CreatedAt: t0}}, nil
	})
	if err != nil {
		b.Fatal(err)
	}
	const files = `
INSERT INTO data_files (project_id, acquisition_id, sha256, size_bytes, media_type, file_name, store, object_key, status, uploaded_by, created_at, stored_at)
SELECT $1, CASE WHEN i % 10 = 0 THEN $2::uuid END, sha256(convert_to('bench-' || i, 'UTF8')), i, 'application/octet-stream',
       'f' || i || '.bin', 'disk', 'sha256/' || i, 'stored', $3, $4, $4
FROM generate_series(1, $5::int) AS i`
	if _, err := conn.Exec(ctx, files, project.ID, a.ID, user.ID, t0, n); err != nil {
		b.Fatal(err)
	}
	// Leaves in canonical form: members in code-point order, no spaces, the instant
	// in the ledger's fixed six-digit form.
	const events = `
INSERT INTO ledger_events (actor, at, action, entity_type, entity_id, leaf)
SELECT $1, $2, 'create', 'data_file', f.id::text,
       convert_to('{"action":"create","actor":"' || $1 || '","at":"' || $3 || '","entity_id":"' || f.id || '","entity_type":"data_file","state":{"id":"' || f.id || '"},"v":1}', 'UTF8')
FROM data_files f ORDER BY f.created_at, f.id`
	if _, err := conn.Exec(ctx, events, user.ID, t0, t0.UTC().Format("2006-01-02T15:04:05.000000Z07:00")); err != nil {
		b.Fatal(err)
	}
	if _, err := conn.Exec(ctx, `ANALYZE`); err != nil {
		b.Fatal(err)
	}
	if _, err := db.SignCheckpoint(ctx, newLedgerSigner(b), t0); err != nil {
		b.Fatal(err)
	}
}
