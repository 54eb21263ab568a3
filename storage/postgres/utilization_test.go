package postgres_test

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
)

// usageWorld is a billing facility in March 2031 with one project of the PI's.
type usageWorld struct {
	db   *postgres.DB
	conn *pgx.Conn
	from time.Time // 1 March 2031, UTC
	pi   accounts.User
	in   scheduling.Instrument
	p    accounts.Project
}

func newUsageWorld(t *testing.T) usageWorld {
	u := usageWorld{from: time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)}
	u.db, u.conn = openRaw(t)
	_, u.pi, u.in = billingFacility(t, u.db, u.from)
	u.p = mustCreateProject(t, u.db, "P-1", u.pi.ID)
	return u
}

// TestUtilizationSumsCountEveryUsage reads a month with a booking used twice, one
// still in use, one unused and one on another instrument, through the store's own
// check-in and check-out: every usage counts once, on its own instrument, for the
// facility-wide read and for one instrument's alike.
func TestUtilizationSumsCountEveryUsage(t *testing.T) {
	u := newUsageWorld(t)
	db, ctx, from, pi, in, p := u.db, context.Background(), u.from, u.pi, u.in, u.p
	to := from.AddDate(0, 1, 0)
	other := mustCreateInstrument(t, db, "TEM-2")
	book := func(instrument string, start time.Time) string {
		return mustBook(t, db, instrument, p.ID, pi.ID, start, start.Add(time.Hour))
	}
	day := from.Add(9 * time.Hour)
	twice, open := book(in.ID, day), book(in.ID, day.Add(2*time.Hour))
	book(in.ID, day.Add(4*time.Hour))
	book(other.ID, day)
	for _, u := range []struct {
		id      string
		in, out time.Duration // after day; out 0: still in use
	}{{twice, 0, 30 * time.Minute}, {twice, 40 * time.Minute, 60 * time.Minute}, {open, 2 * time.Hour, 0}} {
		if _, err := db.CheckIn(ctx, u.id, day.Add(u.in), pi.ID, scheduling.SourceUser); err != nil {
			t.Fatal(err)
		}
		if u.out > 0 {
			if _, err := db.CheckOut(ctx, u.id, day.Add(u.out), pi.ID); err != nil {
				t.Fatal(err)
			}
		}
	}
	now := day.Add(2*time.Hour + 45*time.Minute)
	all, err := db.UtilizationInputsAll(ctx, from, to, now)
	if err != nil {
		t.Fatal(err)
	}
	one, err := db.UtilizationInputs(ctx, in.ID, from, to, now)
	if err != nil {
		t.Fatal(err)
	}
	// [constructed] 3 bookings of 1 h; used 30 + 20 min of the first and 45 min of the
	// second (in use until now).
	want := []scheduling.UtilizationTotals{{ProjectID: p.ID, Kind: scheduling.KindIndependent, Booked: 3 * time.Hour, Used: 95 * time.Minute}}
	for name, got := range map[string]scheduling.UtilizationSums{"all": all[in.ID].Sums, "one": one.Sums} {
		if !reflect.DeepEqual(got.Totals, want) || len(got.Service) != 0 {
			t.Errorf("%s: sums %+v, want %+v", name, got, want)
		}
		r := scheduling.Utilization(in.ID, from, to, time.UTC, nil, got, nil)
		if r.BookedMinutes != 180 || r.UsedMinutes != 95 || len(r.ByProject) != 1 || len(r.ByKind) != 1 {
			t.Errorf("%s: report %+v", name, r)
		}
	}
	if got := all[other.ID].Sums.Totals; len(got) != 1 || got[0].Booked != time.Hour || got[0].Used != 0 {
		t.Errorf("the other instrument's sums %+v, want its one unused hour", got)
	}
	if _, err := db.UtilizationInputs(ctx, "0b7c7a4e-0d6f-4c53-9d3c-9f5c2a1e7b10", from, to, now); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("an unknown instrument's report: %v, want not found", err)
	}
}

// TestCheckInFollowsTheLastCheckOut: a booking's usages follow one another. A
// check-in dated before the booking's last check-out is refused, naming "at", and the
// database refuses overlapping usages written behind the store's back.
func TestCheckInFollowsTheLastCheckOut(t *testing.T) {
	u := newUsageWorld(t)
	db, conn, ctx, from, pi, in, p := u.db, u.conn, context.Background(), u.from, u.pi, u.in, u.p
	start := from.Add(9 * time.Hour)
	b := mustBook(t, db, in.ID, p.ID, pi.ID, start, start.Add(2*time.Hour))
	if _, err := db.CheckIn(ctx, b, start, pi.ID, scheduling.SourceUser); err != nil {
		t.Fatal(err)
	}
	if _, err := db.CheckOut(ctx, b, start.Add(time.Hour), pi.ID); err != nil {
		t.Fatal(err)
	}
	_, err := db.CheckIn(ctx, b, start.Add(59*time.Minute), pi.ID, scheduling.SourceAgent)
	wantKind(t, err, beamledger.ErrInvalid)
	if e := domainError(t, err); e.Fields["at"] == "" {
		t.Fatalf("a check-in before the last check-out: %v, want a field error on at", err)
	}
	// Back to back is fine: the second usage starts where the first ended.
	if _, err := db.CheckIn(ctx, b, start.Add(time.Hour), pi.ID, scheduling.SourceAgent); err != nil {
		t.Fatal(err)
	}
	var ordinals []int32
	rows, err := conn.Query(ctx, `SELECT ordinal FROM usages WHERE booking_id = $1 ORDER BY started_at`, b)
	if err != nil {
		t.Fatal(err)
	}
	if ordinals, err = pgx.CollectRows(rows, pgx.RowTo[int32]); err != nil || !slices.Equal(ordinals, []int32{1, 2}) {
		t.Errorf("ordinals %v (%v), want [1 2]", ordinals, err)
	}
	_, err = conn.Exec(ctx, `INSERT INTO usages (booking_id, ordinal, started_at, ended_at, started_by, source)
VALUES ($1, 3, $2, $3, 'x', 'user')`, b, start.Add(30*time.Minute), start.Add(40*time.Minute))
	if err == nil || !strings.Contains(err.Error(), "usages_no_overlap") {
		t.Errorf("an overlapping usage written directly: %v, want usages_no_overlap to refuse it", err)
	}
}

// TestUsageOrderMigrates: migration 0013 numbers each booking's usages in check-in
// order, and refuses, naming the booking, when two of a booking's usages overlap.
func TestUsageOrderMigrates(t *testing.T) {
	u := newUsageWorld(t)
	db, conn, ctx, from, pi, in, p := u.db, u.conn, context.Background(), u.from, u.pi, u.in, u.p
	var ids []string
	for i := range 2 {
		start := from.Add(time.Duration(9+3*i) * time.Hour)
		ids = append(ids, mustBook(t, db, in.ID, p.ID, pi.ID, start, start.Add(2*time.Hour)))
	}
	if err := db.MigrateTo(ctx, 12); err != nil {
		t.Fatal(err)
	}
	at := func(h, m int) time.Time { return from.Add(time.Duration(h)*time.Hour + time.Duration(m)*time.Minute) }
	for _, u := range []struct {
		booking  int
		from, to time.Time
	}{{0, at(10, 0), at(10, 30)}, {0, at(9, 0), at(10, 0)}, {1, at(12, 0), at(13, 0)}, {1, at(12, 30), at(13, 30)}} {
		if _, err := conn.Exec(ctx, `INSERT INTO usages (booking_id, started_at, ended_at, started_by, source) VALUES ($1, $2, $3, 'x', 'user')`,
			ids[u.booking], u.from, u.to); err != nil {
			t.Fatal(err)
		}
	}
	if err := db.MigrateTo(ctx, 13); err == nil || !strings.Contains(err.Error(), ids[1]) {
		t.Fatalf("up over overlapping usages: %v, want an error naming booking %s", err, ids[1])
	}
	if _, err := conn.Exec(ctx, `DELETE FROM usages WHERE booking_id = $1 AND started_at = $2`, ids[1], at(12, 30)); err != nil {
		t.Fatal(err)
	}
	if err := db.MigrateTo(ctx, 13); err != nil {
		t.Fatal(err)
	}
	rows, err := conn.Query(ctx, `SELECT ordinal FROM usages WHERE booking_id = $1 ORDER BY started_at`, ids[0])
	if err != nil {
		t.Fatal(err)
	}
	if got, err := pgx.CollectRows(rows, pgx.RowTo[int32]); err != nil || !slices.Equal(got, []int32{1, 2}) {
		t.Errorf("ordinals by start %v (%v), want [1 2]", got, err)
	}
}

// TestUtilizationSumsFollowTheRules holds the store's aggregate to
// scheduling.SumUtilization, the rules in Go, over bookings generated at random (a
// fixed seed): every kind, cancelled early and late (and displaced by service), no-
// shows, up to three usages starting early or late and overrunning, some back to
// back, some still open or starting after now, ranges crossing the report's bounds,
// all at microsecond resolution, on three instruments with three cancellation windows.
// Both a month and a range with odd bounds must agree to the microsecond.
func TestUtilizationSumsFollowTheRules(t *testing.T) {
	db, conn := openRaw(t)
	ctx := context.Background()
	month := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	mgr, pi, first := billingFacility(t, db, month)
	instruments := []string{first.ID, mustCreateInstrument(t, db, "TEM-2").ID, mustCreateInstrument(t, db, "TEM-3").ID}
	windows := []time.Duration{24 * time.Hour, 2 * time.Hour, 0} // TEM-1 keeps the facility's default
	for i, w := range windows[1:] {
		minutes := int(w / time.Minute)
		if err := db.SetInstrumentBillingOverride(ctx, instruments[i+1], scheduling.BillingPolicyOverride{CancellationWindowMinutes: &minutes}, mgr.ID, t0); err != nil {
			t.Fatal(err)
		}
	}
	var projects []string
	for _, code := range []string{"P-1", "P-2", "P-3", "P-4"} {
		projects = append(projects, mustCreateProject(t, db, code, pi.ID).ID)
	}
	now := month.Add(19*24*time.Hour + 13*time.Hour + 17*time.Minute + 123456*time.Microsecond)
	g := utilizationGenerator{t: t, conn: conn, r: rand.New(rand.NewPCG(2031, 3)), user: pi.ID, projects: projects, now: now}
	bookings := map[string][]scheduling.UtilizationBooking{}
	for _, id := range instruments {
		g.staff = mustCreateUser(t, db, "staff-"+id+"@example.org", accounts.RoleStaff).ID
		bookings[id] = g.instrument(id, month.Add(-3*24*time.Hour), month.AddDate(0, 1, 3))
	}
	for feature, n := range g.seen {
		t.Logf("%s: %d", feature, n)
	}
	for _, feature := range []string{"service", "cancelled late", "cancelled early", "displaced", "no-show", "no-show used",
		"two usages or more", "back to back", "open", "open after now", "usage of a cancelled booking"} {
		if g.seen[feature] == 0 {
			t.Errorf("the generated bookings have no %s: the test would not check it", feature)
		}
	}

	odd := time.Date(2031, 3, 10, 7, 13, 0, 500000000, time.UTC)
	for _, r := range [][2]time.Time{{month, month.AddDate(0, 1, 0)}, {odd, odd.Add(12*24*time.Hour + 17*time.Second + 250*time.Microsecond)}} {
		from, to := r[0], r[1]
		all, err := db.UtilizationInputsAll(ctx, from, to, now)
		if err != nil {
			t.Fatal(err)
		}
		for i, id := range instruments {
			var overlapping []scheduling.UtilizationBooking
			for _, b := range bookings[id] {
				if b.Start.Before(to) && from.Before(b.End) {
					overlapping = append(overlapping, b)
				}
			}
			want := sortedSums(scheduling.SumUtilization(from, to, windows[i], overlapping, now))
			got := sortedSums(all[id].Sums)
			if d := sumsDiff(got, want); d != "" {
				t.Errorf("%s over [%s, %s): the store's sums differ from the rules' (store | rules):%s", id, from, to, d)
			}
			one, err := db.UtilizationInputs(ctx, id, from, to, now)
			if err != nil {
				t.Fatal(err)
			}
			if d := sumsDiff(sortedSums(one.Sums), want); d != "" {
				t.Errorf("%s alone over [%s, %s): (store | rules)%s", id, from, to, d)
			}
		}
	}
}

func sortedSums(s scheduling.UtilizationSums) scheduling.UtilizationSums {
	s.Totals = slices.Clone(s.Totals)
	slices.SortFunc(s.Totals, func(a, b scheduling.UtilizationTotals) int {
		return cmp.Or(strings.Compare(a.ProjectID, b.ProjectID), strings.Compare(string(a.Kind), string(b.Kind)))
	})
	s.Service = slices.Clone(s.Service)
	slices.SortFunc(s.Service, func(a, b scheduling.Interval) int { return a.Start.Compare(b.Start) })
	return s
}

// sumsDiff lists the totals and service intervals of two sorted sums that differ.
func sumsDiff(got, want scheduling.UtilizationSums) string {
	var b strings.Builder
	for i := range max(len(got.Totals), len(want.Totals)) {
		var g, w scheduling.UtilizationTotals
		if i < len(got.Totals) {
			g = got.Totals[i]
		}
		if i < len(want.Totals) {
			w = want.Totals[i]
		}
		if g != w {
			fmt.Fprintf(&b, "\n\t%+v\n\t%+v", g, w)
		}
	}
	same := func(a, b scheduling.Interval) bool { return a.Start.Equal(b.Start) && a.End.Equal(b.End) }
	if !slices.EqualFunc(got.Service, want.Service, same) {
		fmt.Fprintf(&b, "\n\tservice %v\n\tservice %v", got.Service, want.Service)
	}
	return b.String()
}

// utilizationGenerator writes random bookings, usages and no-shows straight into the
// tables (the store's rules on making them are tested elsewhere), and returns them as
// the utilization rules read them.
type utilizationGenerator struct {
	t        *testing.T
	conn     *pgx.Conn
	r        *rand.Rand
	user     string
	staff    string
	projects []string
	now      time.Time
	seen     map[string]int
}

// between is a random duration in [lo, hi) at microsecond resolution.
func (g *utilizationGenerator) between(lo, hi time.Duration) time.Duration {
	return lo + time.Duration(g.r.Int64N(int64((hi-lo)/time.Microsecond)))*time.Microsecond
}

func (g *utilizationGenerator) note(feature string) {
	if g.seen == nil {
		g.seen = map[string]int{}
	}
	g.seen[feature]++
}

// instrument fills [from, to) of one instrument with bookings one after another
// (active ones may not overlap), some back to back.
func (g *utilizationGenerator) instrument(id string, from, to time.Time) []scheduling.UtilizationBooking {
	ctx := context.Background()
	var out []scheduling.UtilizationBooking
	var lastService string
	for at := from; at.Before(to); {
		if g.r.IntN(4) > 0 {
			at = at.Add(g.between(time.Microsecond, 6*time.Hour))
		}
		b := scheduling.UtilizationBooking{Start: at, End: at.Add(g.between(15*time.Minute, 8*time.Hour)), Status: scheduling.StatusActive}
		at = b.End
		var project, staff, displacedBy *string
		switch k := g.r.IntN(10); {
		case k == 0:
			b.Kind = scheduling.KindService
		case k < 6:
			b.Kind = scheduling.KindIndependent
		case k < 7:
			b.Kind = scheduling.KindAssisted
		case k < 8:
			b.Kind = scheduling.KindTraining
		default:
			b.Kind = scheduling.KindUnattended
		}
		if b.Kind != scheduling.KindService {
			b.ProjectID = g.projects[g.r.IntN(len(g.projects))]
			project = &b.ProjectID
		}
		if b.Kind == scheduling.KindAssisted || b.Kind == scheduling.KindTraining {
			staff = &g.staff
		}
		if g.r.IntN(5) == 0 {
			b.Status = scheduling.StatusCancelled
			c := b.Start.Add(-g.between(-time.Hour, 30*time.Hour)) // up to an hour after the start
			b.CancelledAt = &c
			if lastService != "" && b.Kind != scheduling.KindService && g.r.IntN(3) == 0 {
				b.Displaced, displacedBy = true, &lastService
				g.note("displaced")
			}
		}
		var id2 string
		err := g.conn.QueryRow(ctx, `
INSERT INTO bookings (instrument_id, project_id, user_id, kind, during, staff_id, status, displaced_by, cancelled_at, created_at, created_by, updated_at)
VALUES ($1, $2, $3, $4, tstzrange($5, $6, '[)'), $7, $8, $9, $10, $11, 'test', $11) RETURNING id::text`,
			id, project, g.user, b.Kind, b.Start, b.End, staff, b.Status, displacedBy, b.CancelledAt, t0).Scan(&id2)
		if err != nil {
			g.t.Fatal(err)
		}
		if b.Kind == scheduling.KindService && b.Status == scheduling.StatusActive {
			lastService = id2
			g.note("service")
		}
		b.Usages = g.usages(id2, b)
		if b.Status == scheduling.StatusActive && g.r.IntN(6) == 0 {
			if _, err := g.conn.Exec(ctx, `INSERT INTO no_shows (booking_id, detected_at) VALUES ($1, $2)`, id2, b.Start.Add(15*time.Minute)); err != nil {
				g.t.Fatal(err)
			}
			b.NoShow = true
			g.note(map[bool]string{true: "no-show", false: "no-show used"}[len(b.Usages) == 0])
		}
		if b.Status == scheduling.StatusCancelled && b.Kind != scheduling.KindService {
			late := b.Start.Sub(*b.CancelledAt) < 2*time.Hour
			g.note(map[bool]string{true: "cancelled late", false: "cancelled early"}[late])
		}
		out = append(out, b)
	}
	return out
}

// usages writes none to three usages of a booking, one after another from up to 20
// minutes before its start, some back to back, the last perhaps still open.
func (g *utilizationGenerator) usages(bookingID string, b scheduling.UtilizationBooking) []scheduling.Usage {
	n := []int{0, 1, 1, 1, 2, 3}[g.r.IntN(6)]
	if b.Status == scheduling.StatusCancelled && g.r.IntN(2) == 0 {
		n = 0
	}
	var out []scheduling.Usage
	at := b.Start.Add(g.between(-20*time.Minute, 30*time.Minute))
	for i := range n {
		u := scheduling.Usage{StartedAt: at}
		end := at.Add(g.between(time.Minute, 3*time.Hour))
		if i < n-1 || g.r.IntN(5) > 0 {
			u.EndedAt = &end
		} else {
			g.note("open")
			if at.After(g.now) {
				g.note("open after now")
			}
		}
		if _, err := g.conn.Exec(context.Background(), `
INSERT INTO usages (booking_id, ordinal, started_at, ended_at, started_by, source) VALUES ($1, $2, $3, $4, 'test', 'user')`,
			bookingID, i+1, u.StartedAt, u.EndedAt); err != nil {
			g.t.Fatal(err)
		}
		out = append(out, u)
		at = end
		if g.r.IntN(3) > 0 {
			at = at.Add(g.between(time.Microsecond, 30*time.Minute))
		} else if i < n-1 {
			g.note("back to back")
		}
	}
	if n > 1 {
		g.note("two usages or more")
	}
	if n > 0 && b.Status == scheduling.StatusCancelled {
		g.note("usage of a cancelled booking")
	}
	return out
}
