package postgres

import (
	"bytes"
	"cmp"
	"context"
	"crypto/sha256"
	"encoding/json"
	"errors"
	"runtime"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"
	"github.com/jackc/pgx/v5/pgxpool"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// Computing drafts reads the sources of every project asked for in a few set-based
// queries, prices each project in Go with the scheduling package's pure functions,
// and writes every draft's ledger event (holding its record, every line included) and
// its row naming that event in the same transaction with COPY and multi-row
// statements: the round trips do not grow with the projects or bookings, so a month's
// statements for the whole facility cost about what one does.

// ComputeStatement prices a project's bookings and adjustments of the period holding
// at (bounds given by the caller in the facility's zone) and stores the result as
// the period's draft, replacing an earlier draft of it; created reports a new one. The
// statement and its ledger event commit together. ErrConflict when the period's
// statement was issued; pricing errors (no rate schedule in force, no funding split)
// as scheduling reports them.
func (db *DB) ComputeStatement(ctx context.Context, projectID string, from, to time.Time, actor string, now time.Time) (st scheduling.Statement, created bool, err error) {
	if !accounts.ValidID(projectID) {
		return st, false, beamledger.NotFound("project")
	}
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		drafts, err := computeDrafts(ctx, nil, tx, []string{projectID}, from, to, actor, now)
		if err != nil {
			return err
		}
		d := drafts[0]
		if d.issued {
			return beamledger.Conflict("the statement of this period was issued and cannot change; record corrections as adjustments in a later period")
		}
		st, created = d.st, d.created
		return nil
	})
	return st, created, mapError(err, "statement")
}

// ComputeStatements computes the drafts of many projects for [from, to), as
// ComputeStatement does for one, in a single transaction: either every draft with its
// lines and ledger event is stored, or none is. It returns the drafts in the order of
// projectIDs (a project named twice gets the same draft twice); a project whose
// statement for the period was issued is left as issued and has no draft (a zero
// Statement). Any other error, for any project, stores nothing.
func (db *DB) ComputeStatements(ctx context.Context, projectIDs []string, from, to time.Time, actor string, now time.Time) ([]scheduling.Statement, error) {
	for _, id := range projectIDs {
		if !accounts.ValidID(id) {
			return nil, beamledger.NotFound("project")
		}
	}
	unique := make([]string, 0, len(projectIDs))
	seen := make(map[string]bool, len(projectIDs))
	for _, id := range projectIDs {
		if !seen[id] {
			seen[id] = true
			unique = append(unique, id)
		}
	}
	out := make([]scheduling.Statement, len(projectIDs))
	if len(unique) == 0 {
		return out, nil
	}
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		drafts, err := computeDrafts(ctx, db.pool, tx, unique, from, to, actor, now)
		if err != nil {
			return err
		}
		byProject := make(map[string]scheduling.Statement, len(drafts))
		for i, d := range drafts {
			if !d.issued {
				byProject[unique[i]] = d.st
			}
		}
		for i, id := range projectIDs {
			out[i] = byProject[id]
		}
		return nil
	})
	if err != nil {
		return nil, mapError(err, "statement")
	}
	return out, nil
}

// draft is one project's outcome of computeDrafts.
type draft struct {
	st      scheduling.Statement
	created bool // a new statement, not a recomputed draft
	issued  bool // the period's statement was issued: left alone, st is zero
}

// computeDrafts prices and stores, in tx, the drafts of distinct projects for
// [from, to), each replacing the period's earlier draft, with one ledger event per
// statement (create for a new one, correct for a recomputed one). Projects whose
// statement was issued are reported, not touched. pgx.ErrNoRows when a project or the
// facility does not exist. With a pool, the bookings are read on a connection of its
// when one is free (see bookingReader).
func computeDrafts(ctx context.Context, pool *pgxpool.Pool, tx pgx.Tx, projectIDs []string, from, to time.Time, actor string, now time.Time) ([]draft, error) {
	// The reads below are many rows but simple plans: compiling them (JIT) would cost
	// more than running them.
	if _, err := tx.Exec(ctx, `SET LOCAL jit = off`); err != nil {
		return nil, err
	}
	// Computations of one period take turns, whichever process runs them: two that
	// both found no draft would otherwise both insert one, and the second would fail
	// on the period's unique statement. One key per period cannot deadlock.
	if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock(hashtextextended('beamledger statements ' || $1::text, 0))`, from.UTC()); err != nil {
		return nil, err
	}
	// Lock the period's existing statements (in id order, so that concurrent batches
	// cannot deadlock) before reading what they are priced from.
	type existing struct {
		id     string
		issued bool
		digest []byte // of the draft's state as stored; nil when unknown
	}
	found := map[string]existing{}
	rows, err := tx.Query(ctx, `
SELECT project_id::text, id::text, status = 'issued', state_sha256 FROM statements
WHERE project_id = ANY($1::uuid[]) AND period_start = $2 ORDER BY id FOR UPDATE`, projectIDs, from)
	if err != nil {
		return nil, err
	}
	var pid string
	var e existing
	if _, err := pgx.ForEachRow(rows, []any{&pid, &e.id, &e.issued, &e.digest}, func() error { found[pid] = e; return nil }); err != nil {
		return nil, err
	}

	drafts := make([]draft, len(projectIDs))
	var pending []string
	for i, id := range projectIDs {
		if x, ok := found[id]; ok && x.issued {
			drafts[i].issued = true
			continue
		}
		pending = append(pending, id)
	}
	srcs, err := statementSourcesAll(ctx, tx, pending, from, to, now)
	if err != nil {
		return nil, err
	}

	// The statements to price: every project's not issued, new ones with a new id.
	var todo []int   // indexes into projectIDs
	var ids []string // the statement of each
	for i, id := range projectIDs {
		if drafts[i].issued {
			continue
		}
		x, ok := found[id]
		if !ok {
			x.id, drafts[i].created = uuid.NewString(), true
		}
		todo, ids = append(todo, i), append(ids, x.id)
	}
	// Pricing, assembling and encoding are pure and per project: they run on as many
	// goroutines as there are processors, each project's as soon as its bookings are
	// read, while the next projects' are still being read. The ledger events go into
	// the COPY as they are encoded: while the rest are read, when they are read on
	// another connection. A recomputed draft that comes out exactly as stored (the
	// same canonical state) writes nothing: no event, no row change.
	enc := make([]encodedStatement, len(todo))
	bookings := make([][]scheduling.BillableBooking, len(todo)) // pending[k]'s, written before k is ready
	reader, release, err := bookingReader(ctx, pool, tx, len(pending))
	if err != nil {
		return nil, err
	}
	defer release()
	read := func(ctx context.Context, ready func(k int)) error {
		return billableBookingsEach(ctx, reader, pending, from, to, func(k int, bs []scheduling.BillableBooking) {
			bookings[k] = bs
			ready(k)
		})
	}
	err = parallelInto(ctx, tx, len(todo), read, reader != tx, func(k int) (bool, error) {
		i := todo[k]
		src := srcs[projectIDs[i]]
		src.StatementID, src.Bookings = ids[k], bookings[k]
		sortBillable(src.Bookings)
		in, err := scheduling.PriceStatement(src)
		if err != nil {
			return false, err
		}
		if drafts[i].st, err = scheduling.AssembleStatement(in); err != nil {
			return false, err
		}
		if enc[k], err = encodeStatement(drafts[i].st, drafts[i].created, actor, now); err != nil {
			return false, err
		}
		enc[k].unchanged = !drafts[i].created && bytes.Equal(found[projectIDs[i]].digest, enc[k].digest[:])
		return !enc[k].unchanged, nil
	}, func(k int) provenance.LedgerEvent { return enc[k].event })
	if err != nil {
		return nil, err
	}
	if err := writeStatementRows(ctx, tx, enc, now); err != nil {
		return nil, err
	}
	return drafts, nil
}

// bookingReader is where computeDrafts reads the bookings of n projects: tx itself,
// or, when a pool is given, n is more than one and one of the pool's connections is
// free, a read-only transaction on that connection that imports the snapshot of tx's
// next statement, so it sees exactly what tx would (tx has taken its locks by then).
// On their own connection the bookings are read while tx stores the ledger events of
// the projects read so far. release ends the reader. The pool is never waited for
// long: computations that each held a connection and waited for a second could
// otherwise wait on one another.
func bookingReader(ctx context.Context, pool *pgxpool.Pool, tx pgx.Tx, n int) (reader pgx.Tx, release func(), err error) {
	none := func() {}
	if pool == nil || n < 2 {
		return tx, none, nil
	}
	if st := pool.Stat(); st.IdleConns() == 0 && st.TotalConns() >= st.MaxConns() {
		return tx, none, nil
	}
	actx, cancel := context.WithTimeout(ctx, readerWait)
	conn, err := pool.Acquire(actx)
	cancel()
	if err != nil {
		if ctx.Err() != nil {
			return nil, none, ctx.Err()
		}
		return tx, none, nil
	}
	var snapshot string
	if err := tx.QueryRow(ctx, `SELECT pg_export_snapshot()`).Scan(&snapshot); err != nil {
		conn.Release()
		return nil, none, err
	}
	if reader, err = beginOnSnapshot(ctx, conn, snapshot); err != nil {
		conn.Release()
		return nil, none, err
	}
	if _, err := reader.Exec(ctx, `SET LOCAL jit = off`); err != nil {
		_ = reader.Rollback(context.WithoutCancel(ctx))
		conn.Release()
		return nil, none, err
	}
	return reader, func() {
		_ = reader.Rollback(context.WithoutCancel(ctx))
		conn.Release()
	}, nil
}

// readerWait is how long bookingReader waits for a connection that is being opened.
const readerWait = 100 * time.Millisecond

// statementSourcesAll gathers what each project's statement for [from, to) is priced
// from, but its bookings, keyed by project, in a fixed number of queries. StatementID
// and Bookings (billableBookingsEach) are left for the caller. pgx.ErrNoRows when a
// project or the facility does not exist.
func statementSourcesAll(ctx context.Context, tx pgx.Tx, projectIDs []string, from, to, now time.Time) (map[string]scheduling.StatementSources, error) {
	out := make(map[string]scheduling.StatementSources, len(projectIDs))
	if len(projectIDs) == 0 {
		return out, nil
	}
	var currency string
	if err := tx.QueryRow(ctx, `SELECT currency FROM facility WHERE id = 1`).Scan(&currency); err != nil {
		return nil, err
	}
	policy, err := facilityBillingPolicy(ctx, tx)
	if err != nil {
		return nil, err
	}
	overrides, err := billingOverrides(ctx, tx)
	if err != nil {
		return nil, err
	}
	schedules, err := rateSchedules(ctx, tx, "")
	if err != nil {
		return nil, err
	}
	rows, err := tx.Query(ctx, `SELECT id::text, rate_class FROM projects WHERE id = ANY($1::uuid[])`, projectIDs)
	if err != nil {
		return nil, err
	}
	var id, rc string
	if _, err := pgx.ForEachRow(rows, []any{&id, &rc}, func() error {
		out[id] = scheduling.StatementSources{ProjectID: id, RateClass: accounts.RateClass(rc), Currency: currency,
			PeriodStart: from, PeriodEnd: to, Now: now, Schedules: schedules, Facility: policy, Overrides: overrides,
			ProjectFunding: []scheduling.FundingShare{}}
		return nil
	}); err != nil {
		return nil, err
	}
	if len(out) != len(projectIDs) {
		return nil, pgx.ErrNoRows
	}
	funding, err := projectFundingAll(ctx, tx, projectIDs)
	if err != nil {
		return nil, err
	}
	adjustments, err := adjustmentsAll(ctx, tx, projectIDs, from, to)
	if err != nil {
		return nil, err
	}
	classes, err := accountRateClasses(ctx, tx, projectIDs)
	if err != nil {
		return nil, err
	}
	for id, src := range out {
		src.AccountClasses = classes
		if f, ok := funding[id]; ok {
			src.ProjectFunding = f
		}
		src.Adjustments = adjustments[id]
		out[id] = src
	}
	return out, nil
}

// projectFundingAll reads the default splits of the projects, keyed by project.
func projectFundingAll(ctx context.Context, q querier, projectIDs []string) (map[string][]scheduling.FundingShare, error) {
	rows, err := q.Query(ctx, `
SELECT project_id::text, account_id::text, basis_points FROM project_funding
WHERE project_id = ANY($1::uuid[]) ORDER BY project_id, position`, projectIDs)
	if err != nil {
		return nil, err
	}
	out := map[string][]scheduling.FundingShare{}
	var pid string
	var s scheduling.FundingShare
	_, err = pgx.ForEachRow(rows, []any{&pid, &s.AccountID, &s.BasisPoints}, func() error {
		out[pid] = append(out[pid], s)
		return nil
	})
	return out, err
}

// rebookedMinutes is, for a booking b of the query, the minutes of its range that
// active bookings made since its cancellation took (0 unless it was cancelled): what
// a late cancellation is not charged for. Active bookings of one instrument never
// overlap, so the sum is their union.
const rebookedMinutes = `CASE WHEN b.status = 'cancelled' THEN coalesce((
           SELECT sum(extract(epoch FROM upper(b.during * c.during) - lower(b.during * c.during)))::bigint / 60
           FROM bookings c
           WHERE c.instrument_id = b.instrument_id AND c.status = 'active' AND c.kind <> 'service' AND c.id <> b.id
             AND c.during && b.during AND c.created_at >= b.cancelled_at), 0) ELSE 0 END`

// billableBookingsEach reads the bookings starting in [from, to) of each project, one
// query per project sent together in one batch, and hands each project's to each(k,
// bookings) as soon as its rows are in, in the order of projectIDs: every project
// once, with nil for a project without bookings. Each booking comes with its usage,
// no-show mark, displacement, the minutes of a cancelled booking others booked after
// its cancellation (active bookings of one instrument never overlap, so the sum is
// their union), and its own split; a project's in no particular order (sortBillable
// puts them in the order its statement lists them).
//
// One query per project rather than one for the month: each walks its project's
// bookings in order through bookings_project_idx and finds their usage in the usages
// index that holds the usage's times, where one query for the month joins its bookings
// with every usage ever recorded; and a project is whole as soon as its query ends, so
// its statement can be priced while the next ones are read.
func billableBookingsEach(ctx context.Context, q pgx.Tx, projectIDs []string, from, to time.Time, each func(k int, bookings []scheduling.BillableBooking)) error {
	if len(projectIDs) == 0 {
		return nil
	}
	// First the few bookings that have a split of their own, and the no-shows, each
	// for the whole month in one query (looked up per booking, the no-shows were a
	// scan of their table for each booking while it was small).
	const splits = `
SELECT f.booking_id, f.account_id::text, f.basis_points
FROM booking_funding f JOIN bookings b ON b.id = f.booking_id
WHERE b.project_id = ANY($1::uuid[]) AND b.kind <> 'service' AND lower(b.during) >= $2 AND lower(b.during) < $3
ORDER BY f.booking_id, f.position`
	rows, err := q.Query(ctx, splits, projectIDs, from, to)
	if err != nil {
		return err
	}
	own := map[[16]byte][]scheduling.FundingShare{}
	var bookingID pgtype.UUID
	var share scheduling.FundingShare
	if _, err := pgx.ForEachRow(rows, []any{&bookingID, &share.AccountID, &share.BasisPoints}, func() error {
		own[bookingID.Bytes] = append(own[bookingID.Bytes], share)
		return nil
	}); err != nil {
		return err
	}
	const noShows = `
SELECT n.booking_id FROM no_shows n JOIN bookings b ON b.id = n.booking_id
WHERE b.project_id = ANY($1::uuid[]) AND b.kind <> 'service' AND lower(b.during) >= $2 AND lower(b.during) < $3`
	if rows, err = q.Query(ctx, noShows, projectIDs, from, to); err != nil {
		return err
	}
	noShow := map[[16]byte]bool{}
	if _, err := pgx.ForEachRow(rows, []any{&bookingID}, func() error {
		noShow[bookingID.Bytes] = true
		return nil
	}); err != nil {
		return err
	}

	// One row per booking and usage (NULL usage for a booking without), in no
	// particular order: asking for them in order cost the database more than sorting
	// each project's costs the workers. A booking's usages are asked for in order of
	// their number, which only usages_booking_ordinal_key gives: without that, a
	// plan made before vacuum has marked the table's pages all-visible looked them up
	// through usages_no_overlap, twice as slow.
	const sql = `
SELECT b.id, b.instrument_id, b.kind, lower(b.during), upper(b.during), b.status, b.cancelled_at,
       b.displaced_by IS NOT NULL, ` + rebookedMinutes + `, u.started_at, u.ended_at
FROM bookings b
LEFT JOIN LATERAL (SELECT u.started_at, u.ended_at FROM usages u WHERE u.booking_id = b.id ORDER BY u.ordinal) u ON true
WHERE b.project_id = $1 AND b.kind <> 'service' AND lower(b.during) >= $2 AND lower(b.during) < $3`
	batch := &pgx.Batch{}
	for _, id := range projectIDs {
		batch.Queue(sql, id, from, to)
	}
	br := q.SendBatch(ctx, batch)
	defer br.Close()
	var (
		bb             scheduling.BillableBooking
		id, instrument pgtype.UUID
		kind, status   string
		rebooked       int64
		started, ended pgtype.Timestamptz
		arena          usageArena
		ids            = names{}            // instruments
		hint           int                  // the most bookings a project had so far
		at             = map[[16]byte]int{} // booking → its place in the project's
	)
	b := &bb.Booking
	dest := []any{&id, &instrument, &kind, &b.Start, &b.End, &status, &b.CancelledAt,
		&bb.DisplacedByService, &rebooked, &started, &ended}
	for k, project := range projectIDs {
		rows, err := br.Query()
		if err != nil {
			return err
		}
		var bookings []scheduling.BillableBooking // sized to the largest project before, which most fit in
		if hint > 0 {
			bookings = make([]scheduling.BillableBooking, 0, hint)
		}
		clear(at)
		if _, err := pgx.ForEachRow(rows, dest, func() error {
			i, seen := at[id.Bytes]
			if !seen {
				i = len(bookings)
				at[id.Bytes] = i
				b.ID, b.ProjectID, b.InstrumentID = uuid.UUID(id.Bytes).String(), project, ids.of(instrument)
				b.Kind, b.Status, bb.RebookedMinutes = scheduling.BookingKind(kind), scheduling.BookingStatus(status), int(rebooked)
				b.Start, b.End = b.Start.UTC(), b.End.UTC()
				bb.Usages, bb.Funding, bb.NoShow = nil, own[id.Bytes], noShow[id.Bytes]
				bookings = append(bookings, bb)
			}
			if started.Valid {
				cur := &bookings[i]
				arena.add(&cur.Usages, cur.Booking.ID, started.Time, ended)
			}
			return nil
		}); err != nil {
			return err
		}
		if len(bookings) == 0 {
			bookings = nil
		}
		hint = max(hint, len(bookings))
		each(k, bookings)
	}
	return br.Close()
}

// sortBillable puts one project's bookings as billableBookingsEach reads them in
// booking order (start, then id), each one's usage in order of start. Each statement
// sorts its own, in parallel with the others.
func sortBillable(bs []scheduling.BillableBooking) {
	// Sorted by small keys, then moved once: a billable booking is a few hundred bytes,
	// and swapping those was most of the sort's time.
	type key struct {
		start int64 // Unix microseconds: the database's resolution
		id    string
		i     int
	}
	keys := make([]key, len(bs))
	for i, b := range bs {
		keys[i] = key{b.Booking.Start.UnixMicro(), b.Booking.ID, i}
	}
	slices.SortFunc(keys, func(x, y key) int { return cmp.Or(cmp.Compare(x.start, y.start), strings.Compare(x.id, y.id)) })
	// Place j takes bs[keys[j].i]: applied in place cycle by cycle, each booking
	// moved once through one spare, rather than through a sorted copy of them all.
	for j := range keys {
		if keys[j].i < 0 || keys[j].i == j {
			continue
		}
		spare := bs[j]
		at := j
		for keys[at].i != j {
			from := keys[at].i
			bs[at] = bs[from]
			keys[at].i = -1
			at = from
		}
		bs[at] = spare
		keys[at].i = -1
	}
	for _, x := range bs {
		if len(x.Usages) > 1 {
			slices.SortFunc(x.Usages, func(u, v scheduling.Usage) int { return u.StartedAt.Compare(v.StartedAt) })
		}
	}
}

// adjustmentsAll reads the projects' adjustments made in [from, to), keyed by project.
func adjustmentsAll(ctx context.Context, q querier, projectIDs []string, from, to time.Time) (map[string][]scheduling.Adjustment, error) {
	const sql = `
SELECT project_id::text, id::text, at, amount_minor, reason, made_by::text, funding, coalesce(corrects_statement_id::text, '')
FROM adjustments WHERE project_id = ANY($1::uuid[]) AND at >= $2 AND at < $3 ORDER BY project_id, at, id`
	rows, err := q.Query(ctx, sql, projectIDs, from, to)
	if err != nil {
		return nil, err
	}
	out := map[string][]scheduling.Adjustment{}
	var pid string
	var a scheduling.Adjustment
	var funding []byte
	_, err = pgx.ForEachRow(rows, []any{&pid, &a.ID, &a.At, &a.AmountMinor, &a.Reason, &a.By, &funding, &a.CorrectsStatementID}, func() error {
		a.Funding = nil
		a.At = a.At.UTC()
		if err := json.Unmarshal(funding, &a.Funding); err != nil {
			return err
		}
		out[pid] = append(out[pid], a)
		return nil
	})
	return out, err
}

// encodedStatement is a draft ready to store: its record without lines, the row's
// JSON columns and its ledger event (create for a new statement, correct for a
// recomputed one), whose state is the record with every line.
type encodedStatement struct {
	rec                                         scheduling.StatementRecord
	created                                     bool
	components, accountTotals, instrumentTotals string
	event                                       provenance.LedgerEvent
	digest                                      [sha256.Size]byte // of event.State
	unchanged                                   bool              // a draft recomputed as stored: nothing to write
}

func encodeStatement(st scheduling.Statement, created bool, actor string, now time.Time) (encodedStatement, error) {
	rec := st.Summary()
	e := encodedStatement{rec: rec, created: created}
	for _, f := range []struct {
		dst *string
		v   any
	}{{&e.components, rec.ComponentTotals}, {&e.accountTotals, rec.AccountTotals}, {&e.instrumentTotals, st.InstrumentTotals()}} {
		b, err := json.Marshal(f.v)
		if err != nil {
			return e, err
		}
		*f.dst = string(b)
	}
	action := provenance.ActionCreate
	if !created {
		action = provenance.ActionCorrect
	}
	var err error
	if e.event, err = provenance.NewLedgerEvent(actor, action, provenance.EntityStatement, rec.ID, now, st); err != nil {
		return e, err
	}
	e.digest = sha256.Sum256(e.event.State)
	return e, nil
}

// parallelInto runs f(0) … f(n-1) on as many goroutines as there are processors,
// each f(k) as soon as produce has called ready(k), and appends to the ledger, in tx
// with one COPY, event(k) of every k whose f(k) succeeded asking for it, as each
// finishes. produce must make every k ready once. It runs on the calling goroutine
// before the COPY, so that it may use tx, or, when concurrent, on a goroutine of its
// own during the COPY (it is cancelled if the COPY fails). When any f fails, the
// error of the lowest index that failed is returned (so that the error reported does
// not depend on scheduling), whatever the COPY did; else produce's error, if any. The
// caller's transaction is then to be rolled back. Otherwise every f succeeded and
// every event is stored (statementEventSeqs finds their seqs).
func parallelInto(ctx context.Context, tx pgx.Tx, n int, produce func(ctx context.Context, ready func(k int)) error, concurrent bool,
	f func(k int) (bool, error), event func(k int) provenance.LedgerEvent) error {
	errs := make([]error, n)
	work := make(chan int, n) // buffered for all: produce never waits on the workers
	done := make(chan int, n) // nor the workers on the COPY
	var sent atomic.Int64
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), n) {
		wg.Go(func() {
			for k := range work {
				var send bool
				if send, errs[k] = f(k); errs[k] == nil && send {
					sent.Add(1)
					done <- k
				}
			}
		})
	}
	go func() { wg.Wait(); close(done) }()
	pctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var produceErr error
	produced := make(chan struct{})
	run := func() {
		defer close(produced)
		readied := 0
		produceErr = produce(pctx, func(k int) { readied++; work <- k })
		close(work)
		if produceErr == nil && readied != n {
			produceErr = errors.New("statements: not every statement's sources were read")
		}
	}
	if !concurrent {
		if run(); produceErr != nil {
			for range done { // let the workers finish
			}
			return produceErr
		}
	} else {
		go run()
	}
	src := &eventStream{done: done, event: event}
	_, copyErr := tx.CopyFrom(ctx, pgx.Identifier{"ledger_events"}, []string{"actor", "at", "action", "entity_type", "entity_id", "leaf"}, src)
	if copyErr != nil {
		cancel()
	}
	for range done { // the COPY may have stopped early: let the workers finish
	}
	<-produced
	if err := firstError(errs); err != nil {
		return err
	}
	if copyErr != nil {
		return copyErr
	}
	if produceErr != nil {
		return produceErr
	}
	if int64(src.rows) != sent.Load() {
		return errors.New("statements: not every ledger event was written")
	}
	return nil
}

// eventStream feeds a COPY with the events of finished statements as they arrive.
type eventStream struct {
	done  <-chan int
	event func(k int) provenance.LedgerEvent
	cur   provenance.LedgerEvent
	rows  int
}

func (s *eventStream) Next() bool {
	k, ok := <-s.done
	if ok {
		s.cur, s.rows = s.event(k), s.rows+1
	}
	return ok
}

func (s *eventStream) Values() ([]any, error) {
	ev := s.cur
	return []any{ev.Actor, ev.At, ev.Action, ev.EntityType, ev.EntityID, ev.Leaf}, nil
}

func (s *eventStream) Err() error { return nil }

// writeStatementRows stores the rows of drafts whose events are in the ledger: the
// events' seqs are read back, new statements inserted and earlier drafts updated, each
// naming its event and the digest of its state. The lines are kept in the events
// only. Drafts recomputed unchanged are left as they are.
func writeStatementRows(ctx context.Context, tx pgx.Tx, enc []encodedStatement, now time.Time) error {
	var ids []string
	for _, e := range enc {
		if !e.unchanged {
			ids = append(ids, e.rec.ID)
		}
	}
	if len(ids) == 0 {
		return nil
	}
	seqs, err := statementEventSeqs(ctx, tx, ids)
	if err != nil {
		return err
	}
	var inserts [][]any
	var upd struct {
		ids, currencies, components, accountTotals, instrumentTotals []string
		totals, seqs                                                 []int64
		digests                                                      [][]byte
	}
	for _, e := range enc {
		rec, seq := e.rec, seqs[e.rec.ID]
		switch {
		case e.unchanged:
			continue
		case e.created:
			inserts = append(inserts, []any{rec.ID, rec.ProjectID, rec.PeriodStart, rec.PeriodEnd, rec.Currency, "draft", now,
				rec.TotalMinor, e.components, e.accountTotals, e.instrumentTotals, seq, e.digest[:]})
			continue
		}
		upd.ids, upd.currencies, upd.totals = append(upd.ids, rec.ID), append(upd.currencies, rec.Currency), append(upd.totals, rec.TotalMinor)
		upd.components, upd.accountTotals = append(upd.components, e.components), append(upd.accountTotals, e.accountTotals)
		upd.instrumentTotals, upd.seqs = append(upd.instrumentTotals, e.instrumentTotals), append(upd.seqs, seq)
		upd.digests = append(upd.digests, e.digest[:])
	}
	if len(inserts) > 0 {
		if _, err := tx.CopyFrom(ctx, pgx.Identifier{"statements"}, []string{"id", "project_id", "period_start", "period_end",
			"currency", "status", "computed_at", "total_minor", "component_totals", "account_totals", "instrument_totals", "event_seq",
			"state_sha256"}, pgx.CopyFromRows(inserts)); err != nil {
			return err
		}
	}
	if len(upd.ids) > 0 {
		const q = `
UPDATE statements s SET computed_at = $9, currency = v.currency, total_minor = v.total, component_totals = v.components::jsonb,
       account_totals = v.account_totals::jsonb, instrument_totals = v.instrument_totals::jsonb, event_seq = v.seq,
       state_sha256 = v.digest
FROM unnest($1::uuid[], $2::text[], $3::bigint[], $4::text[], $5::text[], $6::text[], $7::bigint[], $8::bytea[])
     AS v(id, currency, total, components, account_totals, instrument_totals, seq, digest)
WHERE s.id = v.id`
		tag, err := tx.Exec(ctx, q, upd.ids, upd.currencies, upd.totals, upd.components, upd.accountTotals, upd.instrumentTotals,
			upd.seqs, upd.digests, now)
		if err != nil {
			return err
		}
		if tag.RowsAffected() != int64(len(upd.ids)) {
			return errors.New("statements: a draft being recomputed vanished")
		}
	}
	return nil
}

// statementEventSeqs reads back the seq of the ledger event this transaction wrote
// for each statement (COPY returns nothing). The events are found by xmin, the
// transaction's own id: the statements are locked, and an event for one of them
// inserted by anyone else is not taken for ours. Inside a savepoint the rows would
// carry the subtransaction's id and none would be found, an error rather than a wrong
// seq.
func statementEventSeqs(ctx context.Context, tx pgx.Tx, ids []string) (map[string]int64, error) {
	const q = `
SELECT entity_id, seq FROM ledger_events
WHERE entity_type = 'statement' AND entity_id = ANY($1::text[]) AND xmin = pg_current_xact_id()::xid`
	rows, err := tx.Query(ctx, q, ids)
	if err != nil {
		return nil, err
	}
	out := make(map[string]int64, len(ids))
	var id string
	var seq int64
	_, err = pgx.ForEachRow(rows, []any{&id, &seq}, func() error {
		if _, twice := out[id]; twice {
			return errors.New("statements: two ledger events for one statement in one transaction")
		}
		out[id] = seq
		return nil
	})
	if err == nil && len(out) != len(ids) {
		err = errors.New("statements: the ledger events written were not found again")
	}
	return out, err
}

func firstError(errs []error) error {
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}
