package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"beamledger/scheduling"
)

// keptContext is a rules context kept from a read for booking again without reading
// it, with the booking_rules_generation it was read at.
type keptContext struct {
	bc         scheduling.BookingContext
	generation int64
}

// maxKeptContexts bounds the kept contexts of a process, one per booker, instrument
// and project booked lately; past it they are all dropped and kept afresh.
const maxKeptContexts = 4096

func keptKey(nb scheduling.NewBooking) string {
	return nb.InstrumentID + "/" + nb.UserID + "/" + nb.ProjectID
}

// keepContext keeps bc, read on the fast path for nb, unless it depends on more than
// the booker, the instrument and the project: on the range (funding accounts with
// validity dates or caps) or on other bookings of the project (a prime-time
// allowance, which the fast path never takes). What it says about the range itself
// (a waitlist offer holding part of it) is left out; bookKept asks again.
func (db *DB) keepContext(nb scheduling.NewBooking, bc scheduling.BookingContext, read contextRead) {
	if read.bounded || read.capped || bc.Rules.PrimeAllowanceMinutesPerWeek > 0 {
		return
	}
	bc.HeldUntil, bc.FundingSplit, bc.FundingAccounts, bc.PrimeUsedMinutes = nil, nil, nil, 0
	if _, loaded := db.kept.Swap(keptKey(nb), keptContext{bc: bc, generation: read.generation}); !loaded {
		if db.keptCount.Add(1) > maxKeptContexts {
			db.kept.Clear()
			db.keptCount.Store(0)
		}
	}
}

// keptContext returns the context kept for nb's booker, instrument and project.
func (db *DB) keptContext(nb scheduling.NewBooking) (keptContext, bool) {
	v, ok := db.kept.Load(keptKey(nb))
	if !ok {
		return keptContext{}, false
	}
	return v.(keptContext), true
}

// bookKept books nb, whose rules passed on the kept context, in one statement that
// writes it only if the rules' generation is still the kept one, no active booking
// overlaps the range on the instrument or for the staff member, and no waitlist offer
// holds part of it. done is false when the generation has moved on: nothing was
// written, the kept context is dropped, and the caller reads afresh. A hold is
// answered as check words it, given the context with the hold, and an overlap as the
// context read answers it.
func (db *DB) bookKept(ctx context.Context, conn *pgxpool.Conn, nb scheduling.NewBooking, now time.Time, kept keptContext,
	check func(scheduling.BookingContext) error) (b scheduling.Booking, err error, done bool) {
	var found keptOutcome
	err = retry(ctx, func() (err error) {
		b, found, err = insertBookingIfCurrent(ctx, conn, nb, now, kept.generation)
		return err
	})
	switch {
	case err != nil:
		// Name the range hit while the connection is still ours.
		return b, bookingError(ctx, conn, err, nb.InstrumentID, nb.StaffID, nb.Start, nb.End, ""), true
	case found.stale:
		if _, ok := db.kept.LoadAndDelete(keptKey(nb)); ok {
			db.keptCount.Add(-1)
		}
		return b, nil, false
	case found.heldUntil != nil:
		bc := kept.bc
		bc.HeldUntil = found.heldUntil
		if err := check(bc); err != nil {
			return scheduling.Booking{}, err, true
		}
		return b, nil, false // check let a hold through: let the fresh read decide
	case found.taken != nil:
		return scheduling.Booking{}, found.taken, true
	}
	return b, nil, true
}

// keptOutcome is why insertBookingIfCurrent wrote nothing: the generation moved on
// (stale), a waitlist offer holds part of the range until heldUntil, or the range is
// taken (the Conflict naming the first overlap, on the instrument, else for the staff
// member).
type keptOutcome struct {
	stale     bool
	heldUntil *time.Time
	taken     error
}

// insertBookingIfCurrent writes nb and its ledger event, as insertBooking does, if
// the rules' generation is still generation and nothing else stands in the way (see
// bookKept); otherwise it writes nothing and says why. Like the context read it runs
// on PostgreSQL's kept plan, in the same batch: planned for each call's arguments once
// the bookings table is large, its overlap reads cost more to plan than to run.
func insertBookingIfCurrent(ctx context.Context, q batcher, nb scheduling.NewBooking, now time.Time, generation int64) (scheduling.Booking, keptOutcome, error) {
	b, ev, err := newBookingRecord(nb, now, nil)
	if err != nil {
		return scheduling.Booking{}, keptOutcome{}, err
	}
	const sql = `
WITH g AS (SELECT n FROM booking_rules_generation WHERE id = 1),
ib AS (SELECT lower(o.during) AS lo, upper(o.during) AS hi FROM bookings o
    WHERE o.instrument_id = $2 AND o.status = 'active' AND o.during && tstzrange($6, $7, '[)')
    ORDER BY lower(o.during) LIMIT 1),
sb AS (SELECT lower(o.during) AS lo, upper(o.during) AS hi FROM bookings o
    WHERE o.staff_id = nullif($8, '')::uuid AND o.status = 'active' AND o.during && tstzrange($6, $7, '[)')
    ORDER BY lower(o.during) LIMIT 1),
held AS (SELECT max(w.offer_expires_at) AS until FROM waitlist_entries w
    WHERE w.instrument_id = $2 AND w.status = 'offered' AND w.offer_expires_at > $11 AND w.user_id <> $4
      AND w.during && tstzrange($6, $7, '[)')),
b AS (
    INSERT INTO bookings (id, instrument_id, project_id, user_id, kind, during, staff_id, series_id, note, created_at, created_by, updated_at)
    SELECT $1, $2, nullif($3, '')::uuid, $4, $5, tstzrange($6, $7, '[)'), nullif($8, '')::uuid, nullif($9, '')::uuid, $10, $11, $12, $11
    FROM g
    WHERE g.n = $17 AND NOT EXISTS (SELECT 1 FROM ib) AND NOT EXISTS (SELECT 1 FROM sb) AND (SELECT until FROM held) IS NULL
    RETURNING id),
e AS (
    INSERT INTO ledger_events (actor, at, action, entity_type, entity_id, leaf)
    SELECT $12, $13, $14, $15, id::text, $16 FROM b)
SELECT EXISTS (SELECT 1 FROM b), (SELECT n FROM g), (SELECT until FROM held), ib.lo, ib.hi, sb.lo, sb.hi
FROM (SELECT 1) one LEFT JOIN ib ON true LEFT JOIN sb ON true`
	var batch pgx.Batch
	batch.Queue(`SELECT set_config('plan_cache_mode', 'force_generic_plan', true)`)
	batch.Queue(sql, b.ID, nb.InstrumentID, nb.ProjectID, nb.UserID, string(nb.Kind), nb.Start, nb.End,
		nb.StaffID, nb.SeriesID, nb.Note, now, nb.Actor, ev.At, ev.Action, ev.EntityType, ev.Leaf, generation)
	br := q.SendBatch(ctx, &batch)
	var written bool
	var gen *int64
	var held, ibStart, ibEnd, sbStart, sbEnd *time.Time
	if _, err = br.Exec(); err == nil {
		err = br.QueryRow().Scan(&written, &gen, &held, &ibStart, &ibEnd, &sbStart, &sbEnd)
	}
	if cerr := br.Close(); err == nil {
		err = cerr
	}
	var out keptOutcome
	switch {
	case err != nil:
		return scheduling.Booking{}, out, err
	case written:
		return b, out, nil
	case gen == nil || *gen != generation:
		out.stale = true
	case held != nil:
		out.heldUntil = held
	case ibStart != nil && ibEnd != nil:
		out.taken = overlapConflict(instrumentTaken, scheduling.Interval{Start: *ibStart, End: *ibEnd})
	case sbStart != nil && sbEnd != nil:
		out.taken = overlapConflict(staffTaken, scheduling.Interval{Start: *sbStart, End: *sbEnd})
	default:
		out.stale = true // nothing written and no reason given: read afresh
	}
	return scheduling.Booking{}, out, nil
}
