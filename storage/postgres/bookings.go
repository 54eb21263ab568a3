package postgres

import (
	"cmp"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"hash/fnv"
	"slices"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

var _ scheduling.BookingStore = (*DB)(nil)

const bookingSelect = `
SELECT b.id::text, b.instrument_id::text, coalesce(b.project_id::text, ''), b.user_id::text, b.kind,
       lower(b.during), upper(b.during), coalesce(b.staff_id::text, ''), coalesce(b.series_id::text, ''),
       b.status, b.note,
       coalesce((SELECT array_agg(d.id::text ORDER BY lower(d.during), d.id) FROM bookings d WHERE d.displaced_by = b.id), '{}'),
       b.cancelled_at, coalesce(b.cancelled_by, ''), coalesce(b.cancel_reason, ''), b.created_at, b.created_by, b.updated_at
FROM bookings b`

func scanBooking(row pgx.Row) (scheduling.Booking, error) {
	var b scheduling.Booking
	var kind, status string
	err := row.Scan(&b.ID, &b.InstrumentID, &b.ProjectID, &b.UserID, &kind, &b.Start, &b.End, &b.StaffID, &b.SeriesID,
		&status, &b.Note, &b.Displaced, &b.CancelledAt, &b.CancelledBy, &b.CancelReason, &b.CreatedAt, &b.CreatedBy, &b.UpdatedAt)
	b.Kind, b.Status = scheduling.BookingKind(kind), scheduling.BookingStatus(status)
	b.Start, b.End = b.Start.UTC(), b.End.UTC()
	if len(b.Displaced) == 0 {
		b.Displaced = nil
	}
	return b, err
}

// CreateBooking implements scheduling.BookingStore.
func (db *DB) CreateBooking(ctx context.Context, nb scheduling.NewBooking, now time.Time, check func(scheduling.BookingContext) error) (scheduling.Booking, error) {
	out, err, done := db.createBookingDirect(ctx, nb, now, check)
	if !done {
		err = db.retryTx(ctx, func(tx pgx.Tx) error {
			var err error
			out, err = db.createBooking(ctx, tx, nb, now, check)
			return err
		})
	}
	if err != nil {
		return out, db.bookingError(ctx, err, nb.InstrumentID, nb.StaffID, nb.Start, nb.End, "")
	}
	return out, nil
}

// createBookingDirect books without an explicit transaction when nothing needs one:
// the context is read in one statement, the rules are checked, and the booking with
// its ledger event is written in a second, which the exclusion constraints guard as
// always. A read committed transaction would give the rules no stronger view, since
// it locks nothing it reads. The context read also finds an active booking the range
// already overlaps, so that a booking which passes the rules but hits a taken range is
// answered from that one statement, without a failed insert (which PostgreSQL pays
// for in an aborted write and pgx in a re-prepared statement) and without a further
// read to name the range; a booking made between the two statements still meets the
// exclusion constraint. Service bookings (which displace others) and bookings under a
// prime-time allowance (which take a lock) report done=false and go through
// createBooking in a transaction.
//
// A context read here is kept (see keepContext), and the next booking by the same
// booker on the same instrument and project whose rules pass on it is made in one
// statement instead of two (bookKept). A kept context is only ever used to let a
// booking through: one it refuses is judged again on a fresh read.
func (db *DB) createBookingDirect(ctx context.Context, nb scheduling.NewBooking, now time.Time,
	check func(scheduling.BookingContext) error) (b scheduling.Booking, err error, done bool) {
	if nb.Kind == scheduling.KindService {
		return b, nil, false
	}
	// One connection for both statements: a second wait in the pool's queue would
	// double the time a busy server spends waiting for connections.
	conn, err := db.pool.Acquire(ctx)
	if err != nil {
		return b, err, true
	}
	defer conn.Release()
	if kept, ok := db.keptContext(nb); ok && check(kept.bc) == nil {
		if b, err, done := db.bookKept(ctx, conn, nb, now, kept, check); done {
			return b, err, true
		}
	}
	bc, read, err := db.readBookingContext(ctx, conn, nb, now, "")
	if err != nil {
		return b, err, true
	}
	if read.capped || (nb.ProjectID != "" && bc.Rules.PrimeAllowanceMinutesPerWeek > 0) {
		return b, nil, false
	}
	db.keepContext(nb, bc, read)
	if err := check(bc); err != nil {
		return b, err, true
	}
	if read.taken != nil {
		return b, read.taken, true
	}
	err = retry(ctx, func() (err error) {
		b, err = insertBooking(ctx, conn, nb, now, nil)
		return err
	})
	// Name the range hit while the connection is still ours.
	return b, bookingError(ctx, conn, err, nb.InstrumentID, nb.StaffID, nb.Start, nb.End, ""), true
}

// createBooking does CreateBooking's work inside tx (series use it per instance).
func (db *DB) createBooking(ctx context.Context, tx pgx.Tx, nb scheduling.NewBooking, now time.Time, check func(scheduling.BookingContext) error) (scheduling.Booking, error) {
	bc, capped, err := db.bookingContext(ctx, tx, nb, now, "")
	if err != nil {
		return scheduling.Booking{}, err
	}
	if err := check(bc); err != nil {
		return scheduling.Booking{}, err
	}
	if capped {
		b := scheduling.Booking{ProjectID: nb.ProjectID, InstrumentID: nb.InstrumentID, Kind: nb.Kind, Start: nb.Start, End: nb.End}
		if err := checkFundingCaps(ctx, tx, b, nil); err != nil {
			return scheduling.Booking{}, err
		}
	}
	var displaced []string
	if nb.Kind == scheduling.KindService {
		nb.ID = uuid.NewString()
		if displaced, err = displace(ctx, tx, nb.ID, nb, now); err != nil {
			return scheduling.Booking{}, err
		}
	}
	return insertBooking(ctx, tx, nb, now, displaced)
}

// insertBooking writes the booking and its ledger event in one statement. The
// booking's history has no row for its creation: the booking row holds who made it and
// when, and BookingEvents derives the entry from it (the range it was made with is
// the first move's before, or the range it still has).
func insertBooking(ctx context.Context, db querier, nb scheduling.NewBooking, now time.Time, displaced []string) (scheduling.Booking, error) {
	b, ev, err := newBookingRecord(nb, now, displaced)
	if err != nil {
		return scheduling.Booking{}, err
	}
	const q = `
WITH b AS (
    INSERT INTO bookings (id, instrument_id, project_id, user_id, kind, during, staff_id, series_id, note, created_at, created_by, updated_at)
    VALUES ($1, $2, nullif($3, '')::uuid, $4, $5, tstzrange($6, $7, '[)'), nullif($8, '')::uuid, nullif($9, '')::uuid, $10, $11, $12, $11)
    RETURNING id)
INSERT INTO ledger_events (actor, at, action, entity_type, entity_id, leaf)
SELECT $12, $13, $14, $15, id::text, $16 FROM b`
	if _, err := db.Exec(ctx, q, b.ID, nb.InstrumentID, nb.ProjectID, nb.UserID, string(nb.Kind), nb.Start, nb.End,
		nb.StaffID, nb.SeriesID, nb.Note, now, nb.Actor, ev.At, ev.Action, ev.EntityType, ev.Leaf); err != nil {
		return scheduling.Booking{}, err
	}
	return b, nil
}

// newBookingRecord is the booking nb makes at now and its ledger event. The event
// travels in the booking's own statement, so that a booking made without an explicit
// transaction is in the ledger exactly when it exists.
func newBookingRecord(nb scheduling.NewBooking, now time.Time, displaced []string) (scheduling.Booking, provenance.LedgerEvent, error) {
	id := nb.ID
	if id == "" {
		id = uuid.NewString()
	}
	b := scheduling.Booking{
		ID: id, InstrumentID: nb.InstrumentID, ProjectID: nb.ProjectID, UserID: nb.UserID, Kind: nb.Kind,
		Start: nb.Start.UTC(), End: nb.End.UTC(), StaffID: nb.StaffID, SeriesID: nb.SeriesID, Status: scheduling.StatusActive,
		Note: nb.Note, Displaced: displaced, CreatedAt: now, CreatedBy: nb.Actor, UpdatedAt: now,
	}
	ev, err := provenance.NewLedgerEvent(nb.Actor, provenance.ActionCreate, provenance.EntityBooking, id, now, b)
	return b, ev, err
}

// displace cancels the active bookings a service booking overlaps, recording which
// service booking displaced them so that the facility can rebook those people.
func displace(ctx context.Context, tx pgx.Tx, serviceID string, nb scheduling.NewBooking, now time.Time) ([]string, error) {
	const q = `
UPDATE bookings SET status = 'cancelled', cancelled_at = $4, cancelled_by = $5, updated_at = $4,
    cancel_reason = 'displaced by service booking', displaced_by = $6
WHERE instrument_id = $1 AND status = 'active' AND during && tstzrange($2, $3, '[)')
RETURNING id::text, lower(during)`
	rows, err := tx.Query(ctx, q, nb.InstrumentID, nb.Start, nb.End, now, nb.Actor, serviceID)
	if err != nil {
		return nil, err
	}
	type hit struct {
		ID    string
		Start time.Time
	}
	hits, err := pgx.CollectRows(rows, pgx.RowToStructByPos[hit])
	if err != nil {
		return nil, err
	}
	// In time order, as the booking's answer lists them when read back.
	slices.SortFunc(hits, func(a, b hit) int { return cmp.Or(a.Start.Compare(b.Start), strings.Compare(a.ID, b.ID)) })
	ids := make([]string, len(hits))
	for i, h := range hits {
		ids[i] = h.ID
	}
	for _, id := range ids {
		if err := addEvent(ctx, tx, id, now, nb.Actor, "displaced", "service booking "+serviceID, nil, nil); err != nil {
			return nil, err
		}
	}
	return ids, nil
}

// querier is what both a transaction and the pool can do.
type querier interface {
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
	Query(ctx context.Context, sql string, args ...any) (pgx.Rows, error)
	Exec(ctx context.Context, sql string, args ...any) (pgconn.CommandTag, error)
}

// batcher is what a transaction and a pooled connection can do to send several
// statements in one round trip.
type batcher interface {
	SendBatch(ctx context.Context, b *pgx.Batch) pgx.BatchResults
}

// bookingContext reads what the rules need for booking nb, leaving out booking
// excludeID (being moved), and, when a prime-time allowance applies, takes the
// project's lock for it.
func (db *DB) bookingContext(ctx context.Context, tx pgx.Tx, nb scheduling.NewBooking, now time.Time, excludeID string) (bc scheduling.BookingContext, capped bool, err error) {
	bc, read, err := db.readBookingContext(ctx, tx, nb, now, excludeID)
	capped = read.capped
	if err != nil || nb.ProjectID == "" || bc.Rules.PrimeAllowanceMinutesPerWeek == 0 {
		return bc, capped, err
	}
	bc.PrimeUsedMinutes, err = primeUsed(ctx, tx, bc, nb.InstrumentID, nb.ProjectID, nb.Start, excludeID)
	return bc, capped, err
}

// contextRead is what readBookingContext finds beside the rules context.
type contextRead struct {
	// taken is the Conflict naming the first active booking the range overlaps, if any.
	taken error
	// capped reports that the booking's funding split posts to an account with a cap,
	// which checkFundingCaps judges inside a transaction.
	capped bool
	// generation is the booking_rules_generation the context was read at.
	generation int64
	// bounded reports that an account of the project's funding split has validity
	// dates or a cap, so that what the context says about funding depends on the range.
	bounded bool
}

// readBookingContext reads, in one statement, the facility's zone and rules, the
// instrument's override, flag and name, membership, the booked user's current
// qualification, and the first active booking other than excludeID that the range
// overlaps on the instrument or, failing that, for the staff member (read.taken is
// then the Conflict naming it, as bookingError words it), with the generation of the
// rules it was read at. It leaves PrimeUsedMinutes at zero.
func (db *DB) readBookingContext(ctx context.Context, q batcher, nb scheduling.NewBooking, now time.Time, excludeID string) (bc scheduling.BookingContext, read contextRead, err error) {
	var zone string
	var facilityRules, instrumentRules []byte
	// One round trip for the facility, the instrument, membership, the booked user's
	// current qualification (NULL columns when there is none) and the overlaps (NULL
	// when there are none). The overlap reads use the exclusion constraints' indexes.
	const sql = `
SELECT f.time_zone, f.booking_rules, i.rules_override, i.bookable, i.name,
       EXISTS (SELECT 1 FROM project_members m WHERE m.project_id = nullif($3, '')::uuid AND m.user_id = $2),
       q.id::text, q.level, q.granted_by::text, q.granted_at, q.reason, q.expires_after_idle_days, q.last_used_at,
       (SELECT max(o.offer_expires_at) FROM waitlist_entries o WHERE o.instrument_id = i.id AND o.status = 'offered'
           AND o.offer_expires_at > $6 AND o.user_id <> $2 AND o.during && tstzrange($4, $5, '[)')),
       ib.lo, ib.hi, sb.lo, sb.hi,
       (SELECT json_agg(json_build_object('account_id', a.id, 'basis_points', s.basis_points, 'code', a.code,
                                          'valid_from', a.valid_from, 'valid_until', a.valid_until, 'cap_minor', a.cap_minor,
                                          'unfit', coalesce(a.valid_from > $4 OR a.valid_until < $5, false)) ORDER BY s.position)
        FROM (SELECT account_id, basis_points, position FROM booking_funding WHERE booking_id = nullif($8, '')::uuid
              UNION ALL
              SELECT account_id, basis_points, position FROM project_funding WHERE project_id = nullif($3, '')::uuid
                AND NOT EXISTS (SELECT 1 FROM booking_funding WHERE booking_id = nullif($8, '')::uuid)) s
        JOIN funding_accounts a ON a.id = s.account_id
        WHERE a.valid_from > $4 OR a.valid_until < $5 OR a.cap_minor > 0),
       coalesce((SELECT g.n FROM booking_rules_generation g WHERE g.id = 1), 0),
       EXISTS (SELECT 1 FROM project_funding pf JOIN funding_accounts a ON a.id = pf.account_id
               WHERE pf.project_id = nullif($3, '')::uuid
                 AND (a.valid_from IS NOT NULL OR a.valid_until IS NOT NULL OR a.cap_minor > 0))
FROM facility f CROSS JOIN instruments i
LEFT JOIN qualifications q ON q.user_id = $2 AND q.instrument_id = i.id AND q.revoked_at IS NULL
LEFT JOIN LATERAL (SELECT lower(b.during), upper(b.during) FROM bookings b
    WHERE b.instrument_id = i.id AND b.status = 'active' AND b.during && tstzrange($4, $5, '[)') AND b.id::text <> $8
    ORDER BY lower(b.during) LIMIT 1) ib (lo, hi) ON true
LEFT JOIN LATERAL (SELECT lower(b.during), upper(b.during) FROM bookings b
    WHERE b.staff_id = nullif($7, '')::uuid AND b.status = 'active' AND b.during && tstzrange($4, $5, '[)') AND b.id::text <> $8
    ORDER BY lower(b.during) LIMIT 1) sb (lo, hi) ON true
WHERE f.id = 1 AND i.id = $1`
	var qID, qLevel, qBy, qReason *string
	var qAt, qUsed, ibStart, ibEnd, sbStart, sbEnd *time.Time
	var qIdle *int
	var unfunded []byte
	// The read runs on the plan PostgreSQL keeps for the prepared statement. Left to
	// choose, PostgreSQL plans it afresh for every call as soon as the bookings table
	// holds a few thousand rows (the kept plan, made without the range, reckons with
	// thousands of overlapping bookings where there are at most a few), and planning
	// this join costs several times what running it does. The setting is local to the
	// transaction: the batch's own implicit one, which ends with it, or the caller's,
	// where the batch puts the default back after the read.
	var batch pgx.Batch
	batch.Queue(`SELECT set_config('plan_cache_mode', 'force_generic_plan', true)`)
	batch.Queue(sql, nb.InstrumentID, nb.UserID, nb.ProjectID, nb.Start, nb.End, now, nb.StaffID, excludeID)
	_, inTx := q.(pgx.Tx)
	if inTx {
		batch.Queue(`SET LOCAL plan_cache_mode TO DEFAULT`)
	}
	br := q.SendBatch(ctx, &batch)
	if _, err = br.Exec(); err == nil {
		err = br.QueryRow().Scan(
			&zone, &facilityRules, &instrumentRules, &bc.Bookable, &bc.InstrumentName, &bc.Member,
			&qID, &qLevel, &qBy, &qAt, &qReason, &qIdle, &qUsed, &bc.HeldUntil, &ibStart, &ibEnd, &sbStart, &sbEnd, &unfunded,
			&read.generation, &read.bounded)
	}
	if inTx && err == nil {
		_, err = br.Exec()
	}
	if cerr := br.Close(); err == nil {
		err = cerr
	}
	if errors.Is(err, pgx.ErrNoRows) {
		return bc, read, beamledger.NotFound("instrument (or the facility is not set up)")
	}
	if err != nil {
		return bc, read, err
	}
	if bc.Location, err = db.location(zone); err != nil {
		return bc, read, fmt.Errorf("facility time zone %q: %w", zone, err)
	}
	var fo, io scheduling.RulesOverride
	if err := json.Unmarshal(facilityRules, &fo); err != nil {
		return bc, read, fmt.Errorf("facility booking rules: %w", err)
	}
	if err := json.Unmarshal(instrumentRules, &io); err != nil {
		return bc, read, fmt.Errorf("instrument booking rules: %w", err)
	}
	bc.Rules = scheduling.DefaultRules().With(fo).With(io)
	if len(unfunded) > 0 {
		// Accounts come back when not valid over the range (unfit) or capped: a cap
		// is checked after the rules pass, in the booking's transaction.
		var rows []struct {
			scheduling.FundingAccount
			BasisPoints int64  `json:"basis_points"`
			AccountID   string `json:"account_id"`
			Unfit       bool   `json:"unfit"`
		}
		if err := json.Unmarshal(unfunded, &rows); err != nil {
			return bc, read, fmt.Errorf("funding split: %w", err)
		}
		for _, r := range rows {
			read.capped = read.capped || r.CapMinor > 0
			if !r.Unfit {
				continue
			}
			r.FundingAccount.ID = r.AccountID
			bc.FundingSplit = append(bc.FundingSplit, scheduling.FundingShare{AccountID: r.AccountID, BasisPoints: r.BasisPoints})
			bc.FundingAccounts = append(bc.FundingAccounts, r.FundingAccount)
		}
	}
	if qID != nil {
		bc.Qualification = &scheduling.Qualification{ID: *qID, UserID: nb.UserID, InstrumentID: nb.InstrumentID,
			Level: scheduling.QualificationLevel(*qLevel), GrantedBy: *qBy, GrantedAt: *qAt, Reason: *qReason,
			ExpiresAfterIdleDays: qIdle, LastUsedAt: qUsed}
	}
	switch {
	case ibStart != nil && ibEnd != nil:
		read.taken = overlapConflict(instrumentTaken, scheduling.Interval{Start: *ibStart, End: *ibEnd})
	case sbStart != nil && sbEnd != nil:
		read.taken = overlapConflict(staffTaken, scheduling.Interval{Start: *sbStart, End: *sbEnd})
	}
	return bc, read, nil
}

// location returns the named zone, loaded once per process: time.LoadLocation reads
// and parses the zone file on every call, and a zone's rules do not change under a
// running process. The zones are the facility's, a handful at most.
func (db *DB) location(name string) (*time.Location, error) {
	if loc, ok := db.zones.Load(name); ok {
		return loc.(*time.Location), nil
	}
	loc, err := time.LoadLocation(name)
	if err != nil {
		return nil, err
	}
	db.zones.Store(name, loc)
	return loc, nil
}

// primeUsed sums the project's prime-time minutes booked on the instrument in the ISO
// week of start, after taking a transaction lock so that bookings of one project on
// one instrument take their allowance one at a time.
func primeUsed(ctx context.Context, tx pgx.Tx, bc scheduling.BookingContext, instrumentID, projectID string, start time.Time, excludeID string) (int, error) {
	h := fnv.New64a()
	h.Write([]byte(projectID + "/" + instrumentID))
	if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock($1)`, int64(h.Sum64())); err != nil {
		return 0, err
	}
	weekStart, weekEnd := scheduling.PeriodBounds(scheduling.PeriodWeek, start, bc.Location)
	const used = `
SELECT lower(during), upper(during) FROM bookings
WHERE project_id = $1 AND instrument_id = $2 AND status = 'active' AND id::text <> $5
  AND during && tstzrange($3, $4, '[)')`
	rows, err := tx.Query(ctx, used, projectID, instrumentID, weekStart, weekEnd, excludeID)
	if err != nil {
		return 0, err
	}
	spans, err := pgx.CollectRows(rows, pgx.RowToStructByPos[scheduling.Interval])
	if err != nil {
		return 0, err
	}
	minutes := 0
	for _, s := range spans {
		if in, ok := s.Clip(weekStart, weekEnd); ok {
			minutes += scheduling.MinutesInside(bc.Rules.PrimeTime, in.Start, in.End, bc.Location)
		}
	}
	return minutes, nil
}

// addEvent records a change in the booking's history and, in the same transaction,
// appends it to the ledger.
func addEvent(ctx context.Context, tx pgx.Tx, bookingID string, at time.Time, actor, action, reason string, before, after *scheduling.Interval) error {
	rng := func(iv *scheduling.Interval) any {
		if iv == nil {
			return nil
		}
		return fmt.Sprintf("[%s,%s)", iv.Start.UTC().Format(time.RFC3339Nano), iv.End.UTC().Format(time.RFC3339Nano))
	}
	const q = `INSERT INTO booking_events (booking_id, at, actor, action, reason, before, after) VALUES ($1, $2, $3, $4, $5, $6::tstzrange, $7::tstzrange)`
	if _, err := tx.Exec(ctx, q, bookingID, at, actor, action, reason, rng(before), rng(after)); err != nil {
		return err
	}
	change := scheduling.BookingEvent{At: at.UTC(), Actor: actor, Action: action, Reason: reason, Before: before, After: after}
	return appendChange(ctx, tx, actor, action, provenance.EntityBooking, bookingID, at, change)
}

// bookingError turns an exclusion violation into a Conflict naming the range it
// conflicts with (only the range: the other booking's owner is none of the caller's
// business). It reads the conflicting booking after the failed transaction.
func (db *DB) bookingError(ctx context.Context, err error, instrumentID, staffID string, start, end time.Time, excludeID string) error {
	return bookingError(ctx, db.pool, err, instrumentID, staffID, start, end, excludeID)
}

func bookingError(ctx context.Context, q querier, err error, instrumentID, staffID string, start, end time.Time, excludeID string) error {
	var pgErr *pgconn.PgError
	if !errors.As(err, &pgErr) || pgErr.Code != exclusionViolation {
		return mapError(err, "booking")
	}
	col, what, id := "instrument_id", instrumentTaken, instrumentID
	if pgErr.ConstraintName == "bookings_staff_no_overlap" {
		col, what, id = "staff_id", staffTaken, staffID
	}
	sql := `SELECT lower(during), upper(during) FROM bookings
WHERE ` + col + ` = $1 AND status = 'active' AND during && tstzrange($2, $3, '[)') AND id::text <> $4
ORDER BY lower(during) LIMIT 1`
	var iv scheduling.Interval
	if qerr := q.QueryRow(ctx, sql, id, start, end, excludeID).Scan(&iv.Start, &iv.End); qerr != nil {
		return beamledger.Conflict("%s for part of that time", what)
	}
	return overlapConflict(what, iv)
}

// What a Conflict says was hit: the instrument's time or the staff member's.
const (
	instrumentTaken = "the instrument is booked"
	staffTaken      = "the staff member is assisting or training elsewhere"
)

// overlapConflict is the Conflict for a range overlapping the active booking iv.
func overlapConflict(what string, iv scheduling.Interval) error {
	start, end := iv.Start.UTC().Format(time.RFC3339), iv.End.UTC().Format(time.RFC3339)
	return &beamledger.Error{
		Kind:    beamledger.ErrConflict,
		Message: what + " from " + start + " to " + end,
		Fields:  map[string]string{"start": "overlaps [" + start + ", " + end + ")"},
	}
}

// Booking implements scheduling.BookingStore.
func (db *DB) Booking(ctx context.Context, id string) (scheduling.Booking, error) {
	if !accounts.ValidID(id) {
		return scheduling.Booking{}, beamledger.NotFound("booking")
	}
	b, err := scanBooking(db.pool.QueryRow(ctx, bookingSelect+` WHERE b.id = $1`, id))
	return b, mapError(err, "booking")
}

// Bookings implements scheduling.BookingStore.
func (db *DB) Bookings(ctx context.Context, f scheduling.BookingFilter) ([]scheduling.Booking, error) {
	var w filter
	if err := w.ids([2]string{"b.instrument_id", f.InstrumentID}, [2]string{"b.user_id", f.UserID},
		[2]string{"b.project_id", f.ProjectID}, [2]string{"b.series_id", f.SeriesID}); err != nil {
		return nil, err
	}
	if !f.From.IsZero() || !f.To.IsZero() {
		var from, to any // nil: unbounded on that side
		if !f.From.IsZero() {
			from = f.From
		}
		if !f.To.IsZero() {
			to = f.To
		}
		w.where(fmt.Sprintf("b.during && tstzrange(%s::timestamptz, %s::timestamptz, '[)')", w.arg(from), w.arg(to)))
	}
	if !f.IncludeCancelled {
		w.where("b.status = 'active'")
	}
	q := bookingSelect + w.sql()
	rows, err := db.pool.Query(ctx, q+` ORDER BY lower(b.during), b.id LIMIT 5000`, w.args...)
	if err != nil {
		return nil, mapError(err, "booking")
	}
	bs, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.Booking, error) { return scanBooking(r) })
	return bs, mapError(err, "booking")
}

// MoveBooking implements scheduling.BookingStore.
func (db *DB) MoveBooking(ctx context.Context, id string, start, end time.Time, actor, reason string, now time.Time,
	check func(scheduling.Booking, scheduling.BookingContext) error) (scheduling.Booking, error) {
	if !accounts.ValidID(id) {
		return scheduling.Booking{}, beamledger.NotFound("booking")
	}
	var out, cur scheduling.Booking
	err := db.retryTx(ctx, func(tx pgx.Tx) error {
		var err error
		if cur, err = scanBooking(tx.QueryRow(ctx, bookingSelect+` WHERE b.id = $1 FOR UPDATE OF b`, id)); err != nil {
			return err
		}
		if cur.Status != scheduling.StatusActive {
			return beamledger.Conflict("the booking is cancelled; make a new one")
		}
		moved := scheduling.NewBooking{InstrumentID: cur.InstrumentID, UserID: cur.UserID, ProjectID: cur.ProjectID, StaffID: cur.StaffID,
			Start: start, End: end}
		bc, capped, err := db.bookingContext(ctx, tx, moved, now, id)
		if err != nil {
			return err
		}
		if err := check(cur, bc); err != nil {
			return err
		}
		if capped && cur.Kind != scheduling.KindService {
			after := cur
			after.Start, after.End = start, end
			if err := checkFundingCaps(ctx, tx, after, &cur); err != nil {
				return err
			}
		}
		const q = `UPDATE bookings SET during = tstzrange($2, $3, '[)'), updated_at = $4 WHERE id = $1`
		if _, err := tx.Exec(ctx, q, id, start, end, now); err != nil {
			return err
		}
		before, after := scheduling.Interval{Start: cur.Start, End: cur.End}, scheduling.Interval{Start: start, End: end}
		if err := addEvent(ctx, tx, id, now, actor, "moved", reason, &before, &after); err != nil {
			return err
		}
		if err := offerFreed(ctx, tx, cur.InstrumentID, now, db.window()); err != nil {
			return err
		}
		out, err = scanBooking(tx.QueryRow(ctx, bookingSelect+` WHERE b.id = $1`, id))
		return err
	})
	if err != nil {
		return out, db.bookingError(ctx, err, cur.InstrumentID, cur.StaffID, start, end, id)
	}
	return out, nil
}

// CancelBooking implements scheduling.BookingStore.
func (db *DB) CancelBooking(ctx context.Context, id, actor, reason string, now time.Time) (scheduling.Booking, error) {
	if !accounts.ValidID(id) {
		return scheduling.Booking{}, beamledger.NotFound("booking")
	}
	var out scheduling.Booking
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		cur, err := scanBooking(tx.QueryRow(ctx, bookingSelect+` WHERE b.id = $1 FOR UPDATE OF b`, id))
		if err != nil {
			return err
		}
		if cur.Status != scheduling.StatusActive {
			return beamledger.Conflict("the booking was already cancelled")
		}
		const q = `UPDATE bookings SET status = 'cancelled', cancelled_at = $2, cancelled_by = $3, cancel_reason = $4, updated_at = $2 WHERE id = $1`
		if _, err := tx.Exec(ctx, q, id, now, actor, reason); err != nil {
			return err
		}
		if err := addEvent(ctx, tx, id, now, actor, "cancelled", reason, &scheduling.Interval{Start: cur.Start, End: cur.End}, nil); err != nil {
			return err
		}
		if err := offerFreed(ctx, tx, cur.InstrumentID, now, db.window()); err != nil {
			return err
		}
		out, err = scanBooking(tx.QueryRow(ctx, bookingSelect+` WHERE b.id = $1`, id))
		return err
	})
	return out, mapError(err, "booking")
}

// BookingEvents implements scheduling.BookingStore. The first entry is the creation:
// a history row for bookings made before creation stopped writing one, and otherwise
// derived from the booking row (created_at, created_by) with the range the booking was
// made with, which is the before of its first move or, never moved, its range now
// (only a move changes a booking's range, and every move is in the history).
func (db *DB) BookingEvents(ctx context.Context, id string) ([]scheduling.BookingEvent, error) {
	if !accounts.ValidID(id) {
		return nil, beamledger.NotFound("booking")
	}
	const q = `
SELECT at, actor, action, reason, lower(before), upper(before), lower(after), upper(after)
FROM (SELECT 0::bigint AS id, b.created_at AS at, b.created_by AS actor, 'created' AS action, '' AS reason,
             NULL::tstzrange AS before,
             coalesce((SELECT m.before FROM booking_events m WHERE m.booking_id = b.id AND m.action = 'moved' ORDER BY m.id LIMIT 1),
                      b.during) AS after
      FROM bookings b
      WHERE b.id = $1 AND NOT EXISTS (SELECT 1 FROM booking_events c WHERE c.booking_id = b.id AND c.action = 'created')
      UNION ALL
      SELECT id, at, actor, action, reason, before, after FROM booking_events WHERE booking_id = $1) e
ORDER BY id`
	rows, err := db.pool.Query(ctx, q, id)
	if err != nil {
		return nil, mapError(err, "booking")
	}
	evs, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.BookingEvent, error) {
		var e scheduling.BookingEvent
		var bs, be, as, ae *time.Time
		err := r.Scan(&e.At, &e.Actor, &e.Action, &e.Reason, &bs, &be, &as, &ae)
		if bs != nil && be != nil {
			e.Before = &scheduling.Interval{Start: bs.UTC(), End: be.UTC()}
		}
		if as != nil && ae != nil {
			e.After = &scheduling.Interval{Start: as.UTC(), End: ae.UTC()}
		}
		return e, err
	})
	return evs, mapError(err, "booking")
}
