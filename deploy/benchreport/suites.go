package main

// suite is one `go test -bench` run: benchmarks that share a harness, so that each
// figure and its anchor are measured in the same run.
type suite struct {
	Name      string
	Packages  []string
	Bench     string // the -bench pattern
	Benchtime string
	Count     int
	Env       []string
	// About says what the suite measures, for the report.
	About   string
	Figures []figure
}

// figure is one line of the report: a measured value, optionally divided by an
// anchor's, against a target.
type figure struct {
	Label string
	Of    ref  // the value
	Per   *ref // the anchor; nil for an absolute figure
	// Op and Limit are the target: the value (or the ratio to the anchor) must be
	// ≥ or ≤ Limit. An empty Op reports the figure without a target.
	Op    string
	Limit float64
	// Seconds shows an absolute ns/op figure in seconds, its limit in seconds too.
	Seconds bool
}

// ref names a median: a benchmark (without "Benchmark" and the -N suffix) and a unit.
type ref struct{ Bench, Unit string }

func at(bench, unit string) ref { return ref{bench, unit} }
func anchor(bench, unit string) *ref {
	r := ref{bench, unit}
	return &r
}

// suites are every benchmark the project defines, each with its anchor and target.
var suites = []suite{
	{
		Name: "booking", Packages: []string{"./server/"}, Bench: "^BenchmarkBookingCreate$", Benchtime: "3000x", Count: 3,
		About: "64 clients book random 1–4 h ranges on 8 instruments (about one in five conflicts). Anchor: the bare pgx insert " +
			"into the bookings table with its exclusion constraints; measured: a booking through the whole HTTP stack " +
			"(JWT, JSON, authorization, rules, the booking with its ledger event).",
		Figures: []figure{
			{Label: "bookings created per second, HTTP vs raw insert", Of: at("BookingCreate/http", "creates/s"),
				Per: anchor("BookingCreate/raw_pgx", "creates/s"), Op: "≥", Limit: 0.5},
			{Label: "p99 latency of one attempt, HTTP vs raw insert", Of: at("BookingCreate/http", "p99-ms"),
				Per: anchor("BookingCreate/raw_pgx", "p99-ms"), Op: "≤", Limit: 2},
		},
	},
	{
		Name: "files", Packages: []string{"./storage/objects/", "./server/", "./cmd/beamledger/"},
		Bench: "^Benchmark(RawPutObject|FileUpload|UploadCommand|Scrub)$", Benchtime: "1x", Count: 3,
		About: "2 GiB through the harness's S3 server on local disk. Anchors: minio-go PutObject of the same bytes (with its default options, " +
			"which sign the payload without TLS, and with the options the S3 store uses: unsigned, a CRC32C per part), and a plain " +
			"Go SHA-256 pass over a stored object read from the same store. Needs about 12 GiB of disk.",
		Figures: []figure{
			{Label: "upload endpoint (digest declared) vs raw PutObject", Of: at("FileUpload/endpoint-2GiB", "MB/s"),
				Per: anchor("RawPutObject/default", "MB/s"), Op: "≥", Limit: 0.9},
			{Label: "`beamledger upload` vs raw PutObject", Of: at("UploadCommand", "MB/s"),
				Per: anchor("RawPutObject/default", "MB/s"), Op: "≥", Limit: 0.9},
			{Label: "upload endpoint vs raw PutObject with the store's options (no target)", Of: at("FileUpload/endpoint-2GiB", "MB/s"),
				Per: anchor("RawPutObject/store-options", "MB/s")},
			{Label: "`beamledger upload` vs raw PutObject with the store's options (no target)", Of: at("UploadCommand", "MB/s"),
				Per: anchor("RawPutObject/store-options", "MB/s")},
			{Label: "`beamledger scrub` vs a plain SHA-256 pass", Of: at("Scrub/scrub", "MB/s"),
				Per: anchor("Scrub/plain-sha256", "MB/s"), Op: "≥", Limit: 0.9},
			{Label: "server peak RSS growth uploading 1 GiB (MiB)", Of: at("FileUpload/rss-1GiB", "rss-growth-MiB"), Op: "≤", Limit: 64},
			{Label: "server peak RSS growth uploading 4 GiB (MiB)", Of: at("FileUpload/rss-4GiB", "rss-growth-MiB"), Op: "≤", Limit: 64},
		},
	},
	{
		Name: "ledger", Packages: []string{"./storage/postgres/"}, Bench: "^BenchmarkLedger$", Benchtime: "3x", Count: 1,
		About: "A ledger of 1,000,000 events (about 400 canonical bytes each) in one PostgreSQL. Anchor of verify: the same " +
			"canonical bytes read from the database in index order and hashed in one SHA-256 pass.",
		Figures: []figure{
			{Label: "`ledger verify` vs one SHA-256 pass over the same bytes from the database", Of: at("Ledger/verify", "ns/op"),
				Per: anchor("Ledger/sha256_stream", "ns/op"), Op: "≤", Limit: 2},
			{Label: "`ledger verify` vs one SHA-256 pass over the same bytes in memory (no target)", Of: at("Ledger/verify", "ns/op"),
				Per: anchor("Ledger/sha256_memory", "ns/op")},
			{Label: "inclusion proof, p99 (ms)", Of: at("Ledger/inclusion_proof", "p99-ms"), Op: "≤", Limit: 5},
			{Label: "inclusion proof, p50 (ms)", Of: at("Ledger/inclusion_proof", "p50-ms")},
		},
	},
	{
		Name: "trace", Packages: []string{"./storage/postgres/"}, Bench: "^BenchmarkTraceByDigest$", Benchtime: "2000x", Count: 1,
		About: "Random digests looked up among 1,000,000 stored files (one in ten on an acquisition, each with its ledger event, all " +
			"sealed), each trace gathered with its inclusion proofs.",
		Figures: []figure{
			{Label: "trace by digest, p99 (ms)", Of: at("TraceByDigest", "p99-ms"), Op: "≤", Limit: 20},
			{Label: "trace by digest, p50 (ms)", Of: at("TraceByDigest", "p50-ms")},
		},
	},
	{
		Name: "cost-recovery", Packages: []string{"./storage/postgres/"}, Bench: "^BenchmarkCostRecovery$", Benchtime: "3x", Count: 1,
		About: "One generated year: 40 instruments, 300 projects, 1,000,000 bookings with usage. Anchors: the single SQL aggregate " +
			"giving the same totals; measured: every project's statement for a month (priced line by line, split across funding " +
			"accounts, stored with its ledger event holding its lines; each run a month not billed before) and every instrument's utilization report for the year.",
		Figures: []figure{
			{Label: "a month's statements for every project vs one SQL aggregate", Of: at("CostRecovery/statements_month/beamledger", "ns/op"),
				Per: anchor("CostRecovery/statements_month/raw_sql", "ns/op"), Op: "≤", Limit: 1.5},
			{Label: "a month's statements for every project (s)", Of: at("CostRecovery/statements_month/beamledger", "ns/op"), Op: "≤", Limit: 2, Seconds: true},
			{Label: "the year's utilization report for every instrument vs one SQL aggregate", Of: at("CostRecovery/utilization_year/beamledger", "ns/op"),
				Per: anchor("CostRecovery/utilization_year/raw_sql", "ns/op"), Op: "≤", Limit: 1.5},
			{Label: "the year's utilization report for every instrument (s)", Of: at("CostRecovery/utilization_year/beamledger", "ns/op"), Op: "≤", Limit: 2, Seconds: true},
		},
	},
	{
		Name: "ledger-append", Packages: []string{"./cmd/beamledger/"}, Bench: "^BenchmarkLedgerAppend$", Benchtime: "20000x", Count: 1,
		About: "64 writers spread over three `beamledger serve` processes over one PostgreSQL each create specimens, one ledger " +
			"event written in each specimen's transaction; every process seals every 200 ms.",
		Figures: []figure{
			{Label: "ledger appends per second", Of: at("LedgerAppend", "events/s")},
			{Label: "append latency p99 (ms, the whole request)", Of: at("LedgerAppend", "p99-ms")},
			{Label: "sealing lag after the last write (ms)", Of: at("LedgerAppend", "seal-lag-ms"), Op: "≤", Limit: 1000},
		},
	},
}
