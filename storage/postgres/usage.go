package postgres

import (
	"context"
	"encoding/json"
	"errors"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

var _ scheduling.UsageStore = (*DB)(nil)

const usageColumns = `id::text, booking_id::text, started_at, ended_at, started_by, coalesce(ended_by, ''), source`

func scanUsage(row pgx.Row) (scheduling.Usage, error) {
	var u scheduling.Usage
	var source string
	err := row.Scan(&u.ID, &u.BookingID, &u.StartedAt, &u.EndedAt, &u.StartedBy, &u.EndedBy, &source)
	u.Source = scheduling.UsageSource(source)
	return u, err
}

// lockActiveBooking locks a booking for a usage change and returns it.
func lockActiveBooking(ctx context.Context, tx pgx.Tx, id string) (scheduling.Booking, error) {
	b, err := scanBooking(tx.QueryRow(ctx, bookingSelect+` WHERE b.id = $1 FOR UPDATE OF b`, id))
	if err != nil {
		return b, err
	}
	if b.Status != scheduling.StatusActive {
		return b, beamledger.Conflict("the booking is cancelled")
	}
	return b, nil
}

// CheckIn implements scheduling.UsageStore.
func (db *DB) CheckIn(ctx context.Context, bookingID string, at time.Time, actor string, source scheduling.UsageSource) (scheduling.Usage, error) {
	if !accounts.ValidID(bookingID) {
		return scheduling.Usage{}, beamledger.NotFound("booking")
	}
	var out scheduling.Usage
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		b, err := lockActiveBooking(ctx, tx, bookingID)
		if err != nil {
			return err
		}
		// The booking's usages so far: one still open, the last check-out, the last number.
		// A new usage follows them (usages_no_overlap), numbered next (ordinal).
		const prior = `SELECT coalesce(bool_or(ended_at IS NULL), false), max(ended_at), coalesce(max(ordinal), 0) FROM usages WHERE booking_id = $1`
		var open bool
		var lastOut *time.Time
		var n int
		if err := tx.QueryRow(ctx, prior, bookingID).Scan(&open, &lastOut, &n); err != nil {
			return err
		}
		if open {
			return beamledger.Conflict("the booking is already checked in; check out first")
		}
		if lastOut != nil && at.Before(*lastOut) {
			return beamledger.InvalidField("at", "must not be before the booking's last check-out at "+lastOut.UTC().Format(time.RFC3339))
		}
		const q = `INSERT INTO usages (booking_id, started_at, started_by, source, ordinal) VALUES ($1, $2, $3, $4, $5) RETURNING ` + usageColumns
		if out, err = scanUsage(tx.QueryRow(ctx, q, bookingID, at, actor, string(source), n+1)); err != nil {
			return err
		}
		// Use keeps an idle-expiring qualification alive.
		const touch = `UPDATE qualifications SET last_used_at = greatest(coalesce(last_used_at, $3), $3)
WHERE user_id = $1 AND instrument_id = $2 AND revoked_at IS NULL`
		if _, err := tx.Exec(ctx, touch, b.UserID, b.InstrumentID, at); err != nil {
			return err
		}
		return addEvent(ctx, tx, bookingID, at, actor, "checked_in", "", nil, nil)
	})
	return out, mapError(err, "usage")
}

// CheckOut implements scheduling.UsageStore.
func (db *DB) CheckOut(ctx context.Context, bookingID string, at time.Time, actor string) (scheduling.Usage, error) {
	if !accounts.ValidID(bookingID) {
		return scheduling.Usage{}, beamledger.NotFound("booking")
	}
	var out scheduling.Usage
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		// A cancelled booking may still be checked out: the work happened.
		if _, err := scanBooking(tx.QueryRow(ctx, bookingSelect+` WHERE b.id = $1 FOR UPDATE OF b`, bookingID)); err != nil {
			return err
		}
		cur, err := scanUsage(tx.QueryRow(ctx, `SELECT `+usageColumns+` FROM usages WHERE booking_id = $1 AND ended_at IS NULL`, bookingID))
		if errors.Is(err, pgx.ErrNoRows) {
			return beamledger.Conflict("the booking is not checked in")
		}
		if err != nil {
			return err
		}
		if !at.After(cur.StartedAt) {
			return beamledger.InvalidField("at", "must be after the check-in at "+cur.StartedAt.UTC().Format(time.RFC3339))
		}
		const q = `UPDATE usages SET ended_at = $2, ended_by = $3 WHERE id = $1 RETURNING ` + usageColumns
		if out, err = scanUsage(tx.QueryRow(ctx, q, cur.ID, at, actor)); err != nil {
			return err
		}
		return addEvent(ctx, tx, bookingID, at, actor, "checked_out", "", nil, nil)
	})
	return out, mapError(err, "usage")
}

// UsageReport implements scheduling.UsageStore.
func (db *DB) UsageReport(ctx context.Context, bookingID string, now time.Time) (scheduling.UsageReport, error) {
	r := scheduling.UsageReport{BookingID: bookingID, Usages: []scheduling.Usage{}}
	b, err := db.Booking(ctx, bookingID)
	if err != nil {
		return r, err
	}
	rows, err := db.pool.Query(ctx, `SELECT `+usageColumns+` FROM usages WHERE booking_id = $1 ORDER BY started_at, id`, bookingID)
	if err != nil {
		return r, mapError(err, "usage")
	}
	if r.Usages, err = pgx.CollectRows(rows, func(row pgx.CollectableRow) (scheduling.Usage, error) { return scanUsage(row) }); err != nil {
		return r, mapError(err, "usage")
	}
	var used, over time.Duration
	for _, u := range r.Usages {
		span := u.Span(now)
		used += span.End.Sub(span.Start)
		over += u.Overrun(b.Start, b.End, now)
	}
	r.UsedMinutes, r.OverrunMinutes = int(used/time.Minute), int(over/time.Minute)
	err = db.pool.QueryRow(ctx, `SELECT detected_at FROM no_shows WHERE booking_id = $1`, bookingID).Scan(&r.NoShowAt)
	if errors.Is(err, pgx.ErrNoRows) {
		err = nil
	}
	return r, mapError(err, "usage")
}

// MarkNoShows implements scheduling.UsageStore.
func (db *DB) MarkNoShows(ctx context.Context, now time.Time) ([]string, error) {
	var marked []string
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var facilityRules []byte
		if err := tx.QueryRow(ctx, `SELECT booking_rules FROM facility WHERE id = 1`).Scan(&facilityRules); err != nil {
			return err
		}
		var fo scheduling.RulesOverride
		if err := json.Unmarshal(facilityRules, &fo); err != nil {
			return err
		}
		// Candidates: started within the last week, active, not service, no usage, not
		// yet marked. SKIP LOCKED lets two processes run this at once.
		const q = `
SELECT b.id::text, lower(b.during), i.rules_override FROM bookings b JOIN instruments i ON i.id = b.instrument_id
WHERE b.status = 'active' AND b.kind <> 'service' AND lower(b.during) <= $1 AND lower(b.during) > $1 - interval '7 days'
  AND NOT EXISTS (SELECT 1 FROM usages u WHERE u.booking_id = b.id)
  AND NOT EXISTS (SELECT 1 FROM no_shows n WHERE n.booking_id = b.id)
FOR UPDATE OF b SKIP LOCKED`
		rows, err := tx.Query(ctx, q, now)
		if err != nil {
			return err
		}
		type cand struct {
			ID    string
			Start time.Time
			Rules []byte
		}
		cands, err := pgx.CollectRows(rows, pgx.RowToStructByPos[cand])
		if err != nil {
			return err
		}
		for _, c := range cands {
			var io scheduling.RulesOverride
			if err := json.Unmarshal(c.Rules, &io); err != nil {
				return err
			}
			grace := time.Duration(scheduling.DefaultRules().With(fo).With(io).NoShowGraceMinutes) * time.Minute
			if now.Before(c.Start.Add(grace)) {
				continue
			}
			if _, err := tx.Exec(ctx, `INSERT INTO no_shows (booking_id, detected_at) VALUES ($1, $2)`, c.ID, now); err != nil {
				return err
			}
			if err := addEvent(ctx, tx, c.ID, now, "system", "no_show", "no usage within the grace period", nil, nil); err != nil {
				return err
			}
			marked = append(marked, c.ID)
		}
		return nil
	})
	return marked, mapError(err, "usage")
}
