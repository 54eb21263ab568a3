package postgres

import (
	"context"
	"encoding/json"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

// FacilityRules returns the facility's departures from scheduling.DefaultRules.
func (db *DB) FacilityRules(ctx context.Context) (scheduling.RulesOverride, error) {
	var raw []byte
	var o scheduling.RulesOverride
	if err := db.pool.QueryRow(ctx, `SELECT booking_rules FROM facility WHERE id = 1`).Scan(&raw); err != nil {
		return o, mapError(err, "facility")
	}
	return o, json.Unmarshal(raw, &o)
}

// SetFacilityRules replaces the facility's departures from the default rules.
func (db *DB) SetFacilityRules(ctx context.Context, o scheduling.RulesOverride) error {
	raw, err := json.Marshal(o)
	if err != nil {
		return err
	}
	tag, err := db.pool.Exec(ctx, `UPDATE facility SET booking_rules = $1 WHERE id = 1`, raw)
	if err == nil && tag.RowsAffected() == 0 {
		return beamledger.NotFound("facility")
	}
	return mapError(err, "facility")
}

// InstrumentRules returns an instrument's departures from the facility's rules.
func (db *DB) InstrumentRules(ctx context.Context, instrumentID string) (scheduling.RulesOverride, error) {
	var raw []byte
	var o scheduling.RulesOverride
	if !accounts.ValidID(instrumentID) {
		return o, beamledger.NotFound("instrument")
	}
	err := db.pool.QueryRow(ctx, `SELECT rules_override FROM instruments WHERE id = $1`, instrumentID).Scan(&raw)
	if err != nil {
		return o, mapError(err, "instrument")
	}
	return o, json.Unmarshal(raw, &o)
}

// SetInstrumentRules replaces an instrument's departures from the facility's rules.
func (db *DB) SetInstrumentRules(ctx context.Context, instrumentID string, o scheduling.RulesOverride) error {
	if !accounts.ValidID(instrumentID) {
		return beamledger.NotFound("instrument")
	}
	raw, err := json.Marshal(o)
	if err != nil {
		return err
	}
	return mapError(pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		tag, err := tx.Exec(ctx, `UPDATE instruments SET rules_override = $2, updated_at = now() WHERE id = $1`, instrumentID, raw)
		if err == nil && tag.RowsAffected() == 0 {
			return beamledger.NotFound("instrument")
		}
		return err
	}), "instrument")
}

// InsertBookingRow is the bare insert every booking path ends in, with no rules, no
// history and no transaction of its own. It exists as the anchor of the booking
// benchmark: the HTTP path's throughput is reported as a ratio of this one's. Like
// every booking path it tries again when PostgreSQL aborts it to break a deadlock,
// which concurrent inserts checked by the exclusion constraint can meet (twice in
// about 90,000 attempts of the benchmark).
func (db *DB) InsertBookingRow(ctx context.Context, b scheduling.NewBooking) error {
	const q = `
INSERT INTO bookings (instrument_id, project_id, user_id, kind, during, created_at, created_by, updated_at)
VALUES ($1, $2, $3, $4, tstzrange($5, $6, '[)'), now(), $7, now())`
	return mapError(retry(ctx, func() error {
		_, err := db.pool.Exec(ctx, q, b.InstrumentID, b.ProjectID, b.UserID, string(b.Kind), b.Start, b.End, b.Actor)
		return err
	}), "booking")
}
