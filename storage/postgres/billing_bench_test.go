package postgres_test

import (
	"context"
	"maps"
	"os"
	"strconv"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// benchYear is the generated year the cost-recovery benchmark bills, in UTC.
var benchYear = time.Date(2031, 1, 1, 0, 0, 0, 0, time.UTC)

// BenchmarkCostRecovery times, over one generated year (40 instruments, 300 projects,
// BEAMLEDGER_BENCH_BOOKINGS bookings, 1 000 000 unless set, each with one usage),
// every project's statement for one month (ComputeStatements) and every instrument's
// utilization report for the year (one read, UtilizationInputsAll, then one report per
// instrument), each beside the single SQL aggregate that gives the same totals (the
// anchor, "raw_sql"). The beamledger side prices line by line, splits across funding
// accounts and stores every statement with its ledger event holding its lines; the
// anchor only sums. Each side's totals are checked against the other's before timing,
// and each statements run bills a month of its own (see month).
//
//	go run ./deploy/testenv -- go test -run '^$' -bench CostRecovery -benchtime 3x -timeout 60m ./storage/postgres/
func BenchmarkCostRecovery(b *testing.B) {
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
	n := 1_000_000
	if v, err := strconv.Atoi(os.Getenv("BEAMLEDGER_BENCH_BOOKINGS")); err == nil && v > 0 {
		n = v
	}
	start := time.Now()
	projects, instruments := generateBillingYear(b, db, conn, n)
	b.Logf("generated %d bookings with usage in %s", n, time.Since(start).Round(time.Second))

	// Each run bills a month not billed before (March for the check, then April, May
	// and so on; both sides the same month): recomputing an unchanged month writes
	// nothing, and that is not what this measures. Beyond December it wraps around.
	month := func(i int) (time.Time, time.Time) {
		from := benchYear.AddDate(0, 2+i%10, 0)
		return from, from.AddDate(0, 1, 0)
	}
	manager := benchMust(db.CreateUser(ctx, accounts.NewUser{Email: "bench-manager@example.org", DisplayName: "M", Role: accounts.RoleManager}, "h"))(b).ID
	statements := func(i int) map[string]int64 {
		from, to := month(i)
		sts, err := db.ComputeStatements(ctx, projects, from, to, manager, benchYear.AddDate(1, 0, 0))
		if err != nil {
			b.Fatal(err)
		}
		out := map[string]int64{}
		for _, st := range sts {
			if r := st.Summary(); r.TotalMinor != 0 {
				out[r.ProjectID] = r.TotalMinor
			}
		}
		return out
	}
	rawStatements := func(i int) map[string]int64 { from, to := month(i); return rawMonthTotals(b, conn, from, to) }
	if got, want := statements(0), rawStatements(0); !maps.Equal(got, want) {
		b.Fatalf("statement totals differ from the SQL aggregate's (%d and %d projects)", len(got), len(want))
	}
	b.Run("statements_month/raw_sql", func(b *testing.B) {
		i := 0
		for b.Loop() {
			i++
			rawStatements(i)
		}
	})
	b.Run("statements_month/beamledger", func(b *testing.B) {
		i := 0
		for b.Loop() {
			i++
			statements(i)
		}
	})

	yearTo := benchYear.AddDate(1, 0, 0)
	utilization := func() map[string][2]int {
		all, err := db.UtilizationInputsAll(ctx, benchYear, yearTo, yearTo)
		if err != nil {
			b.Fatal(err)
		}
		out := map[string][2]int{}
		for _, id := range instruments {
			in := all[id]
			r := scheduling.Utilization(id, benchYear, yearTo, time.UTC, in.Rules.OpeningHours, in.Sums, in.Quotas)
			out[id] = [2]int{r.BookedMinutes, r.UsedMinutes}
		}
		return out
	}
	rawUtilization := func() map[string][2]int { return rawYearUtilization(b, conn, benchYear, yearTo) }
	if got, want := utilization(), rawUtilization(); !maps.Equal(got, want) {
		b.Fatalf("utilization totals differ from the SQL aggregate's")
	}
	b.Run("utilization_year/raw_sql", func(b *testing.B) {
		for b.Loop() {
			rawUtilization()
		}
	})
	b.Run("utilization_year/beamledger", func(b *testing.B) {
		for b.Loop() {
			utilization()
		}
	})
}

// generateBillingYear makes the facility, 40 instruments each with one rate schedule,
// 300 internal projects each with one funding account as its default split, and n
// independent bookings of 15 or 20 minutes spread evenly over the instruments and the
// year (one every 21 minutes on each instrument at a million), each with one usage that starts up to
// 7 minutes late and ends up to 2 minutes early or 5 late. The bookings and usage are
// written by SQL in the database, and vacuumed, as a year of use would have left them.
func generateBillingYear(b testing.TB, db *postgres.DB, conn *pgx.Conn, n int) (projects, instruments []string) {
	ctx := context.Background()
	if _, err := db.SetFacility(ctx, scheduling.Facility{Name: "Bench", TimeZone: "UTC", Currency: "EUR"}); err != nil {
		b.Fatal(err)
	}
	pi := benchMust(db.CreateUser(ctx, accounts.NewUser{Email: "bench-pi@example.org", DisplayName: "PI", Role: accounts.RoleResearcher}, "h"))(b)
	for i := range 40 {
		in := benchMust(db.CreateInstrument(ctx, scheduling.Instrument{Code: "BENCH-" + strconv.Itoa(i), Name: "Bench " + strconv.Itoa(i), Kind: scheduling.KindSTEM, Bookable: true, AcceleratingVoltagesV: []float64{300e3}, Corrector: scheduling.CorrectorProbe}, "setup", time.Now()))(b)
		instruments = append(instruments, in.ID)
		if _, err := db.CreateRateSchedule(ctx, scheduling.RateSchedule{InstrumentID: in.ID, EffectiveFrom: benchYear.AddDate(0, 0, -1), Currency: "EUR",
			Classes: []scheduling.ClassRates{{RateClass: accounts.RateInternal, IndependentHourlyMinor: int64(9000 + 250*i)}}}, pi.ID, benchYear); err != nil {
			b.Fatal(err)
		}
	}
	for i := range 300 {
		p := benchMust(db.CreateProject(ctx, accounts.NewProject{Code: "BP-" + strconv.Itoa(i), Title: "Bench", PrincipalInvestigatorID: pi.ID, RateClass: accounts.RateInternal}))(b)
		projects = append(projects, p.ID)
		a, err := db.SaveFundingAccount(ctx, scheduling.FundingAccount{ProjectID: p.ID, Code: "G-" + strconv.Itoa(i)}, pi.ID, benchYear)
		if err != nil {
			b.Fatal(err)
		}
		if err := db.SetProjectFunding(ctx, p.ID, []scheduling.FundingShare{{AccountID: a.ID, BasisPoints: 10000}}, pi.ID, benchYear); err != nil {
			b.Fatal(err)
		}
	}
	const bookings = `
INSERT INTO bookings (instrument_id, project_id, user_id, kind, during, created_at, created_by, updated_at)
SELECT i.id, p.id, $1, 'independent',
       tstzrange($2::timestamptz + make_interval(mins => k * $4), $2::timestamptz + make_interval(mins => k * $4 + 15 + (k % 2) * 5), '[)'),
       $2, 'bench', $2
FROM (SELECT id, row_number() OVER (ORDER BY code) - 1 AS n FROM instruments) i
CROSS JOIN generate_series(0, $3 - 1) k
JOIN (SELECT id, row_number() OVER (ORDER BY code) - 1 AS n FROM projects) p ON p.n = (k * 7 + i.n) % 300`
	per := n / 40
	spacing := max(21, 365*24*60/per) // minutes between starts on one instrument
	if _, err := conn.Exec(ctx, bookings, pi.ID, benchYear, per, spacing); err != nil {
		b.Fatal(err)
	}
	const usages = `
INSERT INTO usages (booking_id, ordinal, started_at, ended_at, started_by, ended_by, source)
SELECT id, 1, lower(during) + make_interval(mins => (hashtext(id::text) & 7)),
       upper(during) + make_interval(mins => ((hashtext(id::text) >> 3) & 7) - 2), 'bench', 'bench', 'user'
FROM bookings`
	if _, err := conn.Exec(ctx, usages); err != nil {
		b.Fatal(err)
	}
	// A year of use leaves its tables vacuumed (autovacuum sees to it within minutes of
	// a bulk load): the visibility map set and the statistics current. Without this
	// the runs met autovacuum at work on the fresh million rows, or not, by chance.
	if _, err := conn.Exec(ctx, `VACUUM ANALYZE`); err != nil {
		b.Fatal(err)
	}
	return projects, instruments
}

// rawMonthTotals is the anchor for statements: one aggregate pricing every booking of
// the month under the default policy (the greater of booked and used time, each in
// whole minutes rounded up to 15, at least 60) at its instrument's internal rate,
// rounded half up per line, summed per project.
func rawMonthTotals(b *testing.B, conn *pgx.Conn, from, to time.Time) map[string]int64 {
	const q = `
SELECT b.project_id::text, sum((greatest(
        (ceil(extract(epoch FROM upper(b.during) - lower(b.during)) / 60)::bigint + 14) / 15 * 15,
        (ceil(extract(epoch FROM u.ended_at - u.started_at) / 60)::bigint + 14) / 15 * 15,
        60) * r.independent_hourly_minor * 2 + 60) / 120)::bigint
FROM bookings b
JOIN usages u ON u.booking_id = b.id
JOIN rate_schedules s ON s.instrument_id = b.instrument_id
JOIN rate_schedule_rates r ON r.schedule_id = s.id AND r.rate_class = 'internal'
WHERE lower(b.during) >= $1 AND lower(b.during) < $2 AND b.kind <> 'service'
GROUP BY b.project_id`
	rows, err := conn.Query(context.Background(), q, from, to)
	if err != nil {
		b.Fatal(err)
	}
	out := map[string]int64{}
	var id string
	var total int64
	if _, err := pgx.ForEachRow(rows, []any{&id, &total}, func() error { out[id] = total; return nil }); err != nil {
		b.Fatal(err)
	}
	return out
}

// rawYearUtilization is the anchor for utilization: booked and used minutes per
// instrument over [from, to) in one aggregate (each the summed elapsed time in whole
// minutes, rounded down once, as the report rounds).
func rawYearUtilization(b *testing.B, conn *pgx.Conn, from, to time.Time) map[string][2]int {
	const q = `
SELECT b.instrument_id::text,
       floor(extract(epoch FROM sum(least(upper(b.during), $2) - greatest(lower(b.during), $1))) / 60)::bigint,
       floor(extract(epoch FROM sum(least(u.ended_at, $2) - greatest(u.started_at, $1))) / 60)::bigint
FROM bookings b JOIN usages u ON u.booking_id = b.id
WHERE b.during && tstzrange($1, $2) AND b.status = 'active' AND b.kind <> 'service'
GROUP BY b.instrument_id`
	rows, err := conn.Query(context.Background(), q, from, to)
	if err != nil {
		b.Fatal(err)
	}
	out := map[string][2]int{}
	var id string
	var booked, used int64
	if _, err := pgx.ForEachRow(rows, []any{&id, &booked, &used}, func() error {
		out[id] = [2]int{int(booked), int(used)}
		return nil
	}); err != nil {
		b.Fatal(err)
	}
	return out
}

// benchMust turns a value and an error into the value, failing the benchmark on error.
func benchMust[T any](v T, err error) func(testing.TB) T {
	return func(b testing.TB) T {
		b.Helper()
		if err != nil {
			b.Fatal(err)
		}
		return v
	}
}
