package postgres

import (
	"context"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

var _ scheduling.QuotaStore = (*DB)(nil)

// SetQuota implements scheduling.QuotaStore.
func (db *DB) SetQuota(ctx context.Context, q scheduling.Quota) (scheduling.Quota, error) {
	if !accounts.ValidID(q.ProjectID) || !accounts.ValidID(q.InstrumentID) {
		return q, beamledger.Invalid("project_id and instrument_id must be ids", map[string]string{"project_id": "must be an id", "instrument_id": "must be an id"})
	}
	const sql = `
INSERT INTO quotas (project_id, instrument_id, period, allocated_minutes) VALUES ($1, $2, $3, $4)
ON CONFLICT (project_id, instrument_id, period) DO UPDATE SET allocated_minutes = excluded.allocated_minutes, updated_at = now()`
	_, err := db.pool.Exec(ctx, sql, q.ProjectID, q.InstrumentID, string(q.Period), q.AllocatedMinutes)
	return q, mapError(err, "quota")
}

// Quotas implements scheduling.QuotaStore.
func (db *DB) Quotas(ctx context.Context, projectID string) ([]scheduling.Quota, error) {
	if projectID != "" && !accounts.ValidID(projectID) {
		return nil, beamledger.InvalidField("project_id", "must be an id")
	}
	const sql = `
SELECT project_id::text, instrument_id::text, period, allocated_minutes FROM quotas
WHERE $1 = '' OR project_id::text = $1 ORDER BY project_id, instrument_id, period`
	rows, err := db.pool.Query(ctx, sql, projectID)
	if err != nil {
		return nil, mapError(err, "quota")
	}
	qs, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.Quota, error) {
		var q scheduling.Quota
		var p string
		err := r.Scan(&q.ProjectID, &q.InstrumentID, &p, &q.AllocatedMinutes)
		q.Period = scheduling.Period(p)
		return q, err
	})
	return qs, mapError(err, "quota")
}

// ShareIntervals implements scheduling.QuotaStore.
func (db *DB) ShareIntervals(ctx context.Context, from, to, now time.Time) (booked, used map[scheduling.ShareKey][]scheduling.Interval, err error) {
	const bookedSQL = `
SELECT project_id::text, instrument_id::text, lower(during), upper(during) FROM bookings
WHERE status = 'active' AND project_id IS NOT NULL AND during && tstzrange($1, $2, '[)')`
	const usedSQL = `
SELECT b.project_id::text, b.instrument_id::text, u.started_at, coalesce(u.ended_at, $3) FROM usages u
JOIN bookings b ON b.id = u.booking_id
WHERE b.project_id IS NOT NULL AND u.started_at < $2 AND coalesce(u.ended_at, $3) > $1`
	collect := func(sql string, args ...any) (map[scheduling.ShareKey][]scheduling.Interval, error) {
		rows, err := db.pool.Query(ctx, sql, args...)
		if err != nil {
			return nil, err
		}
		out := map[scheduling.ShareKey][]scheduling.Interval{}
		var k scheduling.ShareKey
		var iv scheduling.Interval
		_, err = pgx.ForEachRow(rows, []any{&k.ProjectID, &k.InstrumentID, &iv.Start, &iv.End}, func() error {
			out[k] = append(out[k], iv)
			return nil
		})
		return out, err
	}
	if booked, err = collect(bookedSQL, from, to); err != nil {
		return nil, nil, mapError(err, "booking")
	}
	used, err = collect(usedSQL, from, to, now)
	return booked, used, mapError(err, "usage")
}
