package server

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math/rand/v2"
	"net/http"
	"slices"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

// benchClients is the number of concurrent clients of the booking benchmark.
const benchClients = 64

// benchPool is the database pool of both sides of the comparison.
const benchPool = 16

// benchWorld prepares a facility for the booking benchmark: 8 instruments open around
// the clock, the researcher qualified for unattended work on each, and a year of
// bookable time, so that random one-to-four-hour bookings on a 15-minute grid conflict
// roughly one time in five over a benchmark's worth of creates.
func benchWorld(b *testing.B) (*world, []string) {
	w := newWorldPool(b, benchPool)
	ctx := context.Background()
	every := scheduling.ClockWindow{Start: "00:00", End: "00:00"}
	horizon, maxLen, lead := 3000, 24*60, 0
	if err := w.db.SetFacilityRules(ctx, scheduling.RulesOverride{OpeningHours: []scheduling.ClockWindow{every},
		PrimeTime: []scheduling.ClockWindow{}, HorizonDays: &horizon, MaxLengthMinutes: &maxLen, LeadTimeMinutes: &lead}); err != nil {
		b.Fatal(err)
	}
	ids := []string{w.instr.ID}
	for i := 1; i < 8; i++ {
		in, err := w.db.CreateInstrument(ctx, scheduling.Instrument{Code: fmt.Sprintf("BENCH-%d", i), Name: "bench", Kind: scheduling.KindTEM, Bookable: true, Corrector: scheduling.CorrectorNone}, "setup", time.Now())
		if err != nil {
			b.Fatal(err)
		}
		ids = append(ids, in.ID)
	}
	for _, id := range ids {
		if _, err := w.db.GrantQualification(ctx, scheduling.NewQualification{UserID: w.users[accounts.RoleResearcher].ID, InstrumentID: id,
			Level: scheduling.LevelIndependent, Reason: "bench", GrantedBy: w.users[accounts.RoleStaff].ID}, w.clock.Now()); err != nil {
			b.Fatal(err)
		}
	}
	return w, ids
}

// slotBase is where a side's random bookings start: warm-up bookings go to a later
// stretch of the calendar, so that they leave the measured run's conflict rate as it is.
func slotBase(base time.Time, warm bool) time.Time {
	if warm {
		return base.AddDate(0, 0, 400)
	}
	return base
}

// benchSlot draws a random booking: an instrument, a start on the 15-minute grid within
// slots quarter-hours from base, and a length of 1–4 h.
func benchSlot(r *rand.Rand, ids []string, base time.Time, slots int) (string, time.Time, time.Time) {
	start := base.Add(time.Duration(r.IntN(slots)) * 15 * time.Minute)
	return ids[r.IntN(len(ids))], start, start.Add(time.Duration(1+r.IntN(4)) * time.Hour)
}

// benchWarmup is how many attempts each side makes, unmeasured, before the timed
// run: enough for every pooled connection to have planned and cached its statements.
// Without it both sides' p99 is set by the first few hundred milliseconds, while 16
// new connections plan their first statements on cold catalog caches and 64 clients
// wait; with it both are measured in steady state, alike.
const benchWarmup = 8 * benchClients

// warmUp makes benchWarmup attempts from benchClients goroutines, ignoring results.
func warmUp(op func(r *rand.Rand, warm bool) (bool, error)) {
	var next atomic.Int64
	var wg sync.WaitGroup
	for c := 0; c < benchClients; c++ {
		wg.Add(1)
		go func(seed uint64) {
			defer wg.Done()
			r := rand.New(rand.NewPCG(seed, 11))
			for next.Add(1) <= benchWarmup {
				_, _ = op(r, true)
			}
		}(uint64(c) + 1000)
	}
	wg.Wait()
}

// runClients runs op b.N times across benchClients goroutines and reports creates/s,
// the share of conflicts, and p50/p99 latency in milliseconds.
func runClients(b *testing.B, op func(r *rand.Rand, warm bool) (created bool, err error)) {
	var created, conflicts atomic.Int64
	var mu sync.Mutex
	lat := make([]time.Duration, 0, b.N)
	var next atomic.Int64
	var wg sync.WaitGroup
	warmUp(op)
	b.ResetTimer()
	start := time.Now()
	for c := 0; c < benchClients; c++ {
		wg.Add(1)
		go func(seed uint64) {
			defer wg.Done()
			r := rand.New(rand.NewPCG(seed, 7))
			for next.Add(1) <= int64(b.N) {
				t0 := time.Now()
				ok, err := op(r, false)
				d := time.Since(t0)
				switch {
				case err != nil:
					b.Error(err)
					return
				case ok:
					created.Add(1)
				default:
					conflicts.Add(1)
				}
				mu.Lock()
				lat = append(lat, d)
				mu.Unlock()
			}
		}(uint64(c) + 1)
	}
	wg.Wait()
	elapsed := time.Since(start)
	b.StopTimer()
	slices.Sort(lat)
	pct := func(p float64) float64 {
		if len(lat) == 0 {
			return 0
		}
		return float64(lat[int(p*float64(len(lat)-1))]) / float64(time.Millisecond)
	}
	b.ReportMetric(float64(created.Load()+conflicts.Load())/elapsed.Seconds(), "attempts/s")
	b.ReportMetric(float64(created.Load())/elapsed.Seconds(), "creates/s")
	b.ReportMetric(100*float64(conflicts.Load())/float64(max(1, created.Load()+conflicts.Load())), "%conflict")
	b.ReportMetric(pct(0.50), "p50-ms")
	b.ReportMetric(pct(0.99), "p99-ms")
}

// BenchmarkBookingCreate compares, against the same PostgreSQL in one run, (a) the bare
// pgx insert into the bookings table with its exclusion constraint and (b) a booking
// create through the whole HTTP stack: JWT, JSON, authorization, rules in the
// booking's transaction, ledger event. Run with `make bench`; compare creates/s and p99-ms
// of the two sub-benchmarks.
//
// The HTTP path reads the rules context of a booker, instrument and project once per
// process and keeps it; each later booking whose rules pass on it is one statement on
// one pooled connection, which writes the booking and its ledger event only if the
// rules' generation is unchanged and no active booking or waitlist offer overlaps the
// range, and otherwise says which (a conflict is answered from that statement; only a
// booking made concurrently reaches the exclusion constraint and a second statement
// naming the range). The benchmark's one booker books 8 instruments for one project,
// so nearly every attempt takes that path; in a facility, a booker's later bookings
// take it until a rule, qualification, membership or funding account changes. Verified
// access tokens are remembered until they expire, and the account check is cached for
// a second per process with one read in flight per user; the anchor issues one
// statement per attempt. Clients, server and database share the machine's cores, so
// throughput follows CPU per attempt. The p99 of both sides is set by the first few
// hundred milliseconds of a run, in which 64 requests wait while each of the pool's 16
// new connections plans its first statements on cold catalog caches: the HTTP side
// warms two larger statements per connection to the anchor's one insert.
func BenchmarkBookingCreate(b *testing.B) {
	const slots = 150 * 24 * 4 // quarter-hours in 150 days: about one conflict in five
	b.Run("raw_pgx", func(b *testing.B) {
		w, ids := benchWorld(b)
		base := w.nextTuesday(0, 0)
		user, project := w.users[accounts.RoleResearcher].ID, w.own.ID
		runClients(b, func(r *rand.Rand, warm bool) (bool, error) {
			id, start, end := benchSlot(r, ids, slotBase(base, warm), slots)
			err := w.db.InsertBookingRow(context.Background(), scheduling.NewBooking{InstrumentID: id, ProjectID: project, UserID: user,
				Kind: scheduling.KindIndependent, Start: start, End: end, Actor: user})
			if errors.Is(err, beamledger.ErrConflict) {
				return false, nil
			}
			return err == nil, err
		})
	})
	b.Run("http", func(b *testing.B) {
		w, ids := benchWorld(b)
		base := w.nextTuesday(0, 0)
		token := w.tokens[accounts.RoleResearcher]
		client := w.http.Client()
		client.Transport.(*http.Transport).MaxIdleConnsPerHost = benchClients
		runClients(b, func(r *rand.Rand, warm bool) (bool, error) {
			id, start, end := benchSlot(r, ids, slotBase(base, warm), slots)
			body, _ := json.Marshal(map[string]string{"instrument_id": id, "project_id": w.own.ID, "kind": "independent",
				"start": start.Format(time.RFC3339), "end": end.Format(time.RFC3339)})
			req, _ := http.NewRequest(http.MethodPost, w.http.URL+"/api/v1/bookings", bytes.NewReader(body))
			req.Header.Set("Content-Type", "application/json")
			req.Header.Set("Authorization", "Bearer "+token)
			res, err := client.Do(req)
			if err != nil {
				return false, err
			}
			var sink bytes.Buffer
			_, _ = sink.ReadFrom(res.Body)
			res.Body.Close()
			switch res.StatusCode {
			case http.StatusCreated:
				return true, nil
			case http.StatusConflict:
				return false, nil
			}
			return false, fmt.Errorf("status %d: %s", res.StatusCode, sink.String())
		})
	})
}
