package postgres

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

var _ scheduling.SeriesStore = (*DB)(nil)

const seriesColumns = `id::text, instrument_id::text, coalesce(project_id::text, ''), user_id::text, kind, rrule, start_wall, time_zone, duration_s / 60, created_by::text, created_at`

func scanSeries(row pgx.Row) (scheduling.Series, error) {
	var s scheduling.Series
	var kind, wall string
	err := row.Scan(&s.ID, &s.InstrumentID, &s.ProjectID, &s.UserID, &kind, &s.RRule, &wall, &s.TimeZone, &s.DurationMinutes, &s.CreatedBy, &s.CreatedAt)
	s.Kind = scheduling.BookingKind(kind)
	if err == nil {
		err = s.Start.UnmarshalText([]byte(wall))
	}
	return s, err
}

// CreateSeries implements scheduling.SeriesStore.
func (db *DB) CreateSeries(ctx context.Context, ns scheduling.NewSeries, now time.Time,
	check func(scheduling.Occurrence, scheduling.BookingContext) error) (scheduling.SeriesResult, error) {
	var res scheduling.SeriesResult
	err := db.retryTx(ctx, func(tx pgx.Tx) error {
		res = scheduling.SeriesResult{Booked: []scheduling.Booking{}, Conflicts: []scheduling.SeriesConflict{}}
		t := ns.Template
		const q = `
INSERT INTO series (instrument_id, project_id, user_id, kind, rrule, start_wall, time_zone, duration_s, created_by)
VALUES ($1, nullif($2, '')::uuid, $3, $4, $5, $6, $7, $8, $9) RETURNING ` + seriesColumns
		var err error
		res.Series, err = scanSeries(tx.QueryRow(ctx, q, t.InstrumentID, t.ProjectID, t.UserID, string(t.Kind), ns.RRule,
			ns.Start.String(), ns.TimeZone, int(ns.Duration.Seconds()), t.Actor))
		if err != nil {
			return err
		}
		for _, occ := range ns.Occurrences {
			nb := t
			nb.Start, nb.End, nb.SeriesID = occ.Start, occ.End, res.Series.ID
			b, conflict, err := db.bookOccurrence(ctx, tx, nb, now, func(bc scheduling.BookingContext) error { return check(occ, bc) })
			if err != nil {
				return err
			}
			if conflict != nil {
				res.Conflicts = append(res.Conflicts, *conflict)
				continue
			}
			res.Booked = append(res.Booked, b)
		}
		if len(res.Conflicts) > 0 && !ns.BookFree {
			return errSeriesRefused
		}
		return nil
	})
	if errors.Is(err, errSeriesRefused) {
		res.Booked = []scheduling.Booking{}
		return res, seriesConflictError(res.Conflicts)
	}
	return res, mapError(err, "series")
}

var errSeriesRefused = errors.New("series refused")

// bookOccurrence books one instance under a savepoint, turning an overlap or a broken
// rule into a SeriesConflict instead of failing the whole transaction.
func (db *DB) bookOccurrence(ctx context.Context, tx pgx.Tx, nb scheduling.NewBooking, now time.Time,
	check func(scheduling.BookingContext) error) (scheduling.Booking, *scheduling.SeriesConflict, error) {
	sp, err := tx.Begin(ctx)
	if err != nil {
		return scheduling.Booking{}, nil, err
	}
	b, err := db.createBooking(ctx, sp, nb, now, check)
	if err == nil {
		return b, nil, sp.Commit(ctx)
	}
	if rbErr := sp.Rollback(ctx); rbErr != nil {
		return b, nil, rbErr
	}
	c := &scheduling.SeriesConflict{Start: nb.Start, End: nb.End}
	var pgErr *pgconn.PgError
	var de *beamledger.Error
	switch {
	case errors.As(err, &pgErr) && pgErr.Code == exclusionViolation:
		c.Message = "overlaps another booking"
		const q = `SELECT lower(during), upper(during) FROM bookings WHERE status = 'active'
AND (instrument_id = $1 OR (staff_id = nullif($2, '')::uuid)) AND during && tstzrange($3, $4, '[)') ORDER BY lower(during) LIMIT 1`
		var s, e time.Time
		if tx.QueryRow(ctx, q, nb.InstrumentID, nb.StaffID, nb.Start, nb.End).Scan(&s, &e) == nil {
			c.Message = fmt.Sprintf("overlaps a booking from %s to %s", s.UTC().Format(time.RFC3339), e.UTC().Format(time.RFC3339))
		}
	case errors.As(err, &de) && errors.Is(err, beamledger.ErrRule):
		c.Message, c.Rule = de.Message, de.Rule
	default:
		return b, nil, err
	}
	return b, c, nil
}

func seriesConflictError(cs []scheduling.SeriesConflict) error {
	fields := map[string]string{}
	for _, c := range cs {
		fields["occurrence "+c.Start.UTC().Format(time.RFC3339)] = c.Message
	}
	return &beamledger.Error{Kind: beamledger.ErrConflict, Fields: fields,
		Message: fmt.Sprintf("%d occurrence(s) of the series cannot be booked, so none was; fix them or ask to book the free ones (book_free)", len(cs))}
}

// Series implements scheduling.SeriesStore.
func (db *DB) Series(ctx context.Context, id string) (scheduling.Series, error) {
	if !accounts.ValidID(id) {
		return scheduling.Series{}, beamledger.NotFound("series")
	}
	s, err := scanSeries(db.pool.QueryRow(ctx, `SELECT `+seriesColumns+` FROM series WHERE id = $1`, id))
	return s, mapError(err, "series")
}

// CancelSeriesFrom implements scheduling.SeriesStore.
func (db *DB) CancelSeriesFrom(ctx context.Context, id string, from time.Time, actor, reason string, now time.Time) ([]scheduling.Booking, error) {
	if !accounts.ValidID(id) {
		return nil, beamledger.NotFound("series")
	}
	var out []scheduling.Booking
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		const q = `
UPDATE bookings SET status = 'cancelled', cancelled_at = $3, cancelled_by = $4, cancel_reason = $5, updated_at = $3
WHERE series_id = $1 AND status = 'active' AND lower(during) >= $2
RETURNING id::text, lower(during), upper(during)`
		rows, err := tx.Query(ctx, q, id, from, now, actor, reason)
		if err != nil {
			return err
		}
		type cancelled struct {
			ID         string
			Start, End time.Time
		}
		cs, err := pgx.CollectRows(rows, pgx.RowToStructByPos[cancelled])
		if err != nil {
			return err
		}
		if len(cs) > 0 {
			var instrumentID string
			if err := tx.QueryRow(ctx, `SELECT instrument_id::text FROM series WHERE id = $1`, id).Scan(&instrumentID); err != nil {
				return err
			}
			if err := offerFreed(ctx, tx, instrumentID, now, db.window()); err != nil {
				return err
			}
		}
		for _, c := range cs {
			if err := addEvent(ctx, tx, c.ID, now, actor, "cancelled", reason, &scheduling.Interval{Start: c.Start, End: c.End}, nil); err != nil {
				return err
			}
			b, err := scanBooking(tx.QueryRow(ctx, bookingSelect+` WHERE b.id = $1`, c.ID))
			if err != nil {
				return err
			}
			out = append(out, b)
		}
		return nil
	})
	if out == nil {
		out = []scheduling.Booking{}
	}
	return out, mapError(err, "series")
}
