package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

var _ scheduling.WaitlistStore = (*DB)(nil)

// DefaultOfferWindow is how long a freed range is held for the waitlist entry it is
// offered to, unless SetOfferWindow says otherwise.
const DefaultOfferWindow = 2 * time.Hour

// SetOfferWindow sets how long waitlist offers stay open. Call it before serving.
func (db *DB) SetOfferWindow(d time.Duration) { db.offerWindow = d }

func (db *DB) window() time.Duration {
	if db.offerWindow <= 0 {
		return DefaultOfferWindow
	}
	return db.offerWindow
}

const waitlistColumns = `id::text, instrument_id::text, project_id::text, user_id::text, kind, coalesce(staff_id::text, ''),
    lower(during), upper(during), status, offered_at, offer_expires_at, coalesce(booking_id::text, ''), created_at, updated_at`

func scanWaitlist(row pgx.Row) (scheduling.WaitlistEntry, error) {
	var e scheduling.WaitlistEntry
	var kind, status string
	err := row.Scan(&e.ID, &e.InstrumentID, &e.ProjectID, &e.UserID, &kind, &e.StaffID, &e.Start, &e.End, &status,
		&e.OfferedAt, &e.OfferExpiresAt, &e.BookingID, &e.CreatedAt, &e.UpdatedAt)
	e.Kind, e.Status = scheduling.BookingKind(kind), scheduling.WaitlistStatus(status)
	e.Start, e.End = e.Start.UTC(), e.End.UTC()
	return e, err
}

// JoinWaitlist implements scheduling.WaitlistStore.
func (db *DB) JoinWaitlist(ctx context.Context, e scheduling.WaitlistEntry, now time.Time) (scheduling.WaitlistEntry, error) {
	var out scheduling.WaitlistEntry
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireInstrument(ctx, tx, e.InstrumentID); err != nil {
			return err
		}
		var taken bool
		const q = `SELECT EXISTS (SELECT 1 FROM bookings WHERE instrument_id = $1 AND status = 'active' AND during && tstzrange($2, $3, '[)'))`
		if err := tx.QueryRow(ctx, q, e.InstrumentID, e.Start, e.End).Scan(&taken); err != nil {
			return err
		}
		if !taken {
			return beamledger.Conflict("that time is free: book it instead of waiting for it")
		}
		const ins = `
INSERT INTO waitlist_entries (instrument_id, project_id, user_id, kind, staff_id, during, created_at, updated_at)
VALUES ($1, $2, $3, $4, nullif($5, '')::uuid, tstzrange($6, $7, '[)'), $8, $8) RETURNING ` + waitlistColumns
		var err error
		out, err = scanWaitlist(tx.QueryRow(ctx, ins, e.InstrumentID, e.ProjectID, e.UserID, string(e.Kind), e.StaffID, e.Start, e.End, now))
		return err
	})
	return out, mapError(err, "waitlist entry")
}

// WaitlistEntry implements scheduling.WaitlistStore.
func (db *DB) WaitlistEntry(ctx context.Context, id string) (scheduling.WaitlistEntry, error) {
	if !accounts.ValidID(id) {
		return scheduling.WaitlistEntry{}, beamledger.NotFound("waitlist entry")
	}
	e, err := scanWaitlist(db.pool.QueryRow(ctx, `SELECT `+waitlistColumns+` FROM waitlist_entries WHERE id = $1`, id))
	return e, mapError(err, "waitlist entry")
}

// WaitlistEntries implements scheduling.WaitlistStore.
func (db *DB) WaitlistEntries(ctx context.Context, f scheduling.WaitlistFilter) ([]scheduling.WaitlistEntry, error) {
	var w filter
	if err := w.ids([2]string{"instrument_id", f.InstrumentID}, [2]string{"user_id", f.UserID}); err != nil {
		return nil, err
	}
	if !f.IncludeClosed {
		w.where("status IN ('waiting', 'offered')")
	}
	q := `SELECT ` + waitlistColumns + ` FROM waitlist_entries` + w.sql()
	rows, err := db.pool.Query(ctx, q+` ORDER BY seq LIMIT 1000`, w.args...)
	if err != nil {
		return nil, mapError(err, "waitlist entry")
	}
	es, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.WaitlistEntry, error) { return scanWaitlist(r) })
	return es, mapError(err, "waitlist entry")
}

// WithdrawWaitlistEntry implements scheduling.WaitlistStore.
func (db *DB) WithdrawWaitlistEntry(ctx context.Context, id string, now time.Time) (scheduling.WaitlistEntry, error) {
	if !accounts.ValidID(id) {
		return scheduling.WaitlistEntry{}, beamledger.NotFound("waitlist entry")
	}
	var out scheduling.WaitlistEntry
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		cur, err := scanWaitlist(tx.QueryRow(ctx, `SELECT `+waitlistColumns+` FROM waitlist_entries WHERE id = $1 FOR UPDATE`, id))
		if err != nil {
			return err
		}
		if cur.Status != scheduling.WaitlistWaiting && cur.Status != scheduling.WaitlistOffered {
			return beamledger.Conflict("the entry is already %s", cur.Status)
		}
		const q = `UPDATE waitlist_entries SET status = 'withdrawn', updated_at = $2 WHERE id = $1 RETURNING ` + waitlistColumns
		if out, err = scanWaitlist(tx.QueryRow(ctx, q, id, now)); err != nil {
			return err
		}
		if cur.Status == scheduling.WaitlistOffered {
			return offerFreed(ctx, tx, cur.InstrumentID, now, db.window())
		}
		return nil
	})
	return out, mapError(err, "waitlist entry")
}

// AcceptOffer implements scheduling.WaitlistStore.
func (db *DB) AcceptOffer(ctx context.Context, id, actor string, now time.Time, check func(scheduling.BookingContext) error) (scheduling.WaitlistEntry, scheduling.Booking, error) {
	if !accounts.ValidID(id) {
		return scheduling.WaitlistEntry{}, scheduling.Booking{}, beamledger.NotFound("waitlist entry")
	}
	var e, cur scheduling.WaitlistEntry
	var b scheduling.Booking
	err := db.retryTx(ctx, func(tx pgx.Tx) error {
		var err error
		cur, err = scanWaitlist(tx.QueryRow(ctx, `SELECT `+waitlistColumns+` FROM waitlist_entries WHERE id = $1 FOR UPDATE`, id))
		if err != nil {
			return err
		}
		switch {
		case cur.Status == scheduling.WaitlistOffered && cur.OfferExpiresAt != nil && !now.Before(*cur.OfferExpiresAt):
			return beamledger.Conflict("the offer lapsed at %s", cur.OfferExpiresAt.UTC().Format(time.RFC3339))
		case cur.Status != scheduling.WaitlistOffered:
			return beamledger.Conflict("the entry is not on offer (it is %s)", cur.Status)
		}
		nb := scheduling.NewBooking{InstrumentID: cur.InstrumentID, ProjectID: cur.ProjectID, UserID: cur.UserID, StaffID: cur.StaffID,
			Kind: cur.Kind, Start: cur.Start, End: cur.End, Actor: actor, Note: "booked from the waitlist"}
		if b, err = db.createBooking(ctx, tx, nb, now, check); err != nil {
			return err
		}
		const q = `UPDATE waitlist_entries SET status = 'booked', booking_id = $2, updated_at = $3 WHERE id = $1 RETURNING ` + waitlistColumns
		e, err = scanWaitlist(tx.QueryRow(ctx, q, id, b.ID, now))
		return err
	})
	if err != nil {
		return e, b, db.bookingError(ctx, err, cur.InstrumentID, cur.StaffID, cur.Start, cur.End, "")
	}
	return e, b, nil
}

// LapseOffers implements scheduling.WaitlistStore.
func (db *DB) LapseOffers(ctx context.Context, now time.Time) ([]string, error) {
	var lapsed []string
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		const q = `
UPDATE waitlist_entries SET status = 'lapsed', updated_at = $1
WHERE status = 'offered' AND offer_expires_at <= $1 RETURNING id::text, instrument_id::text`
		rows, err := tx.Query(ctx, q, now)
		if err != nil {
			return err
		}
		type hit struct{ ID, InstrumentID string }
		hits, err := pgx.CollectRows(rows, pgx.RowToStructByPos[hit])
		if err != nil {
			return err
		}
		done := map[string]bool{}
		for _, h := range hits {
			lapsed = append(lapsed, h.ID)
			if !done[h.InstrumentID] {
				done[h.InstrumentID] = true
				if err := offerFreed(ctx, tx, h.InstrumentID, now, db.window()); err != nil {
					return err
				}
			}
		}
		return nil
	})
	return lapsed, mapError(err, "waitlist entry")
}

// offerFreed offers free time on the instrument to waiting entries, oldest first: an
// entry is offered when no active booking and no other open offer overlaps its range.
func offerFreed(ctx context.Context, tx pgx.Tx, instrumentID string, now time.Time, window time.Duration) error {
	const q = `
SELECT id::text FROM waitlist_entries w
WHERE w.instrument_id = $1 AND w.status = 'waiting' AND upper(w.during) > $2
ORDER BY w.seq FOR UPDATE SKIP LOCKED`
	rows, err := tx.Query(ctx, q, instrumentID, now)
	if err != nil {
		return err
	}
	ids, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return err
	}
	for _, id := range ids {
		// One statement per entry, so an entry offered here blocks a later overlapping one.
		const offer = `
UPDATE waitlist_entries w SET status = 'offered', offered_at = $2, offer_expires_at = $3, updated_at = $2
WHERE w.id = $1
  AND NOT EXISTS (SELECT 1 FROM bookings b WHERE b.instrument_id = w.instrument_id AND b.status = 'active' AND b.during && w.during)
  AND NOT EXISTS (SELECT 1 FROM waitlist_entries o WHERE o.instrument_id = w.instrument_id AND o.status = 'offered'
                  AND o.id <> w.id AND o.during && w.during)`
		if _, err := tx.Exec(ctx, offer, id, now, now.Add(window)); err != nil {
			return err
		}
	}
	return nil
}
