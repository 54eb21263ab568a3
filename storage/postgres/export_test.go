package postgres

import (
	"context"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"beamledger/scheduling"
)

// MigrateTo moves the schema up or down to version, for tests of a migration's data
// handling (beamledger itself only ever migrates up, with Migrate).
func (db *DB) MigrateTo(ctx context.Context, version int64) error {
	p, sqlDB, err := db.provider(nil)
	if err != nil {
		return err
	}
	defer sqlDB.Close()
	current, err := p.GetDBVersion(ctx)
	if err != nil {
		return err
	}
	if version < current {
		_, err = p.DownTo(ctx, version)
	} else {
		_, err = p.UpTo(ctx, version)
	}
	return err
}

// BookingContextPlans reads the rules context of nb n times on one pooled connection,
// in one transaction when inTx, and reports how PostgreSQL ran those reads: how many
// on its kept generic plan and how many on a plan made for their arguments, and the
// session's plan_cache_mode after them (inside the transaction when inTx).
func (db *DB) BookingContextPlans(ctx context.Context, nb scheduling.NewBooking, n int, inTx bool) (generic, custom int64, after string, err error) {
	conn, err := db.pool.Acquire(ctx)
	if err != nil {
		return 0, 0, "", err
	}
	defer conn.Release()
	read := func(q interface {
		batcher
		querier
	}) error {
		for range n {
			if _, _, err := db.readBookingContext(ctx, q, nb, nb.Start, ""); err != nil {
				return err
			}
		}
		return q.QueryRow(ctx, `SHOW plan_cache_mode`).Scan(&after)
	}
	generic, custom, err = planCounts(ctx, conn, "%FROM facility f CROSS JOIN instruments i%", func() error {
		if inTx {
			return pgx.BeginFunc(ctx, conn, func(tx pgx.Tx) error { return read(tx) })
		}
		return read(conn)
	})
	return generic, custom, after, err
}

// planCounts runs fn on conn and reports how many times, meanwhile, the session's
// prepared statements whose text is like pattern ran on PostgreSQL's kept generic
// plan and how many times on a plan made for their arguments.
func planCounts(ctx context.Context, conn *pgxpool.Conn, pattern string, fn func() error) (generic, custom int64, err error) {
	const counts = `
SELECT coalesce(sum(generic_plans), 0), coalesce(sum(custom_plans), 0) FROM pg_prepared_statements
WHERE statement LIKE $1 AND statement NOT LIKE '%pg_prepared_statements%'`
	var g0, c0, g1, c1 int64
	if err := conn.QueryRow(ctx, counts, pattern).Scan(&g0, &c0); err != nil {
		return 0, 0, err
	}
	if err := fn(); err != nil {
		return 0, 0, err
	}
	if err := conn.QueryRow(ctx, counts, pattern).Scan(&g1, &c1); err != nil {
		return 0, 0, err
	}
	return g1 - g0, c1 - c0, nil
}

// KeepsContext reports whether a rules context is kept for nb's booker, instrument
// and project.
func (db *DB) KeepsContext(nb scheduling.NewBooking) bool {
	_, ok := db.keptContext(nb)
	return ok
}

// KeptBookingPlans makes n bookings like nb, an hour each two hours apart, through the
// one-statement path of a kept context (insertBookingIfCurrent) on one pooled
// connection, and reports how PostgreSQL ran that statement: how many times on its kept
// generic plan and how many on a plan made for the call's arguments.
func (db *DB) KeptBookingPlans(ctx context.Context, nb scheduling.NewBooking, n int) (generic, custom int64, err error) {
	conn, err := db.pool.Acquire(ctx)
	if err != nil {
		return 0, 0, err
	}
	defer conn.Release()
	var gen int64
	if err := conn.QueryRow(ctx, `SELECT n FROM booking_rules_generation`).Scan(&gen); err != nil {
		return 0, 0, err
	}
	return planCounts(ctx, conn, "%FROM booking_rules_generation WHERE id = 1),%", func() error {
		for i := range n {
			b := nb
			b.Start = nb.Start.Add(time.Duration(2*i) * time.Hour)
			b.End = b.Start.Add(time.Hour)
			if _, out, err := insertBookingIfCurrent(ctx, conn, b, b.Start, gen); err != nil || out != (keptOutcome{}) {
				return fmt.Errorf("booking %d: %v (%+v)", i, err, out)
			}
		}
		return nil
	})
}

// StatementBookingsRead does what a month's statements do up to their bookings: it
// begins the computing transaction, takes its locks, finds where the bookings are read
// (bookingReader, with n projects to read) and, after between has run, reads
// projectID's bookings of [from, to) there. It reports their ids and whether they were
// read on a connection of their own.
func (db *DB) StatementBookingsRead(ctx context.Context, projectID string, from, to time.Time, n int, between func()) (ids []string, elsewhere bool, err error) {
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `SELECT 1 FROM statements WHERE project_id = $1 AND period_start = $2 FOR UPDATE`, projectID, from); err != nil {
			return err
		}
		reader, release, err := bookingReader(ctx, db.pool, tx, n)
		if err != nil {
			return err
		}
		defer release()
		elsewhere = reader != tx
		between()
		return billableBookingsEach(ctx, reader, []string{projectID}, from, to, func(_ int, bs []scheduling.BillableBooking) {
			for _, b := range bs {
				ids = append(ids, b.Booking.ID)
			}
		})
	})
	return ids, elsewhere, err
}
