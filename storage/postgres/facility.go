package postgres

import (
	"context"

	"beamledger/scheduling"
)

var _ scheduling.FacilityStore = (*DB)(nil)

// Facility implements scheduling.FacilityStore.
func (db *DB) Facility(ctx context.Context) (scheduling.Facility, error) {
	var f scheduling.Facility
	err := db.pool.QueryRow(ctx, `SELECT name, time_zone, currency FROM facility WHERE id = 1`).Scan(&f.Name, &f.TimeZone, &f.Currency)
	return f, mapError(err, "facility")
}

// SetFacility implements scheduling.FacilityStore.
func (db *DB) SetFacility(ctx context.Context, f scheduling.Facility) (scheduling.Facility, error) {
	const q = `
INSERT INTO facility (id, name, time_zone, currency) VALUES (1, $1, $2, $3)
ON CONFLICT (id) DO UPDATE SET name = excluded.name, time_zone = excluded.time_zone, currency = excluded.currency
RETURNING name, time_zone, currency`
	var out scheduling.Facility
	err := db.pool.QueryRow(ctx, q, f.Name, f.TimeZone, f.Currency).Scan(&out.Name, &out.TimeZone, &out.Currency)
	return out, mapError(err, "facility")
}
