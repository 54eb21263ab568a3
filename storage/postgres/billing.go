package postgres

import (
	"context"
	"encoding/json"
	"fmt"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// FacilityBillingPolicy returns the facility's policy: the default with what the
// facility stored over it.
func (db *DB) FacilityBillingPolicy(ctx context.Context) (scheduling.BillingPolicy, error) {
	return facilityBillingPolicy(ctx, db.pool)
}

func facilityBillingPolicy(ctx context.Context, q querier) (scheduling.BillingPolicy, error) {
	var raw []byte
	if err := q.QueryRow(ctx, `SELECT billing_policy FROM facility WHERE id = 1`).Scan(&raw); err != nil {
		return scheduling.BillingPolicy{}, mapError(err, "facility")
	}
	p := scheduling.DefaultBillingPolicy()
	if err := json.Unmarshal(raw, &p); err != nil {
		return p, fmt.Errorf("facility billing policy: %w", err)
	}
	return p, nil
}

// SetFacilityBillingPolicy replaces the facility's policy (validated by the caller)
// and records it in the ledger.
func (db *DB) SetFacilityBillingPolicy(ctx context.Context, p scheduling.BillingPolicy, actor string, now time.Time) error {
	raw, err := json.Marshal(p)
	if err != nil {
		return err
	}
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		tag, err := tx.Exec(ctx, `UPDATE facility SET billing_policy = $1 WHERE id = 1`, raw)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return beamledger.NotFound("facility")
		}
		return appendChange(ctx, tx, actor, provenance.ActionCorrect, provenance.EntityBillingPolicy, "facility", now, p)
	})
	return mapError(err, "billing policy")
}

// InstrumentBillingOverride returns an instrument's departures from the facility's
// policy. ErrNotFound for an unknown instrument.
func (db *DB) InstrumentBillingOverride(ctx context.Context, instrumentID string) (scheduling.BillingPolicyOverride, error) {
	var o scheduling.BillingPolicyOverride
	if !accounts.ValidID(instrumentID) {
		return o, beamledger.NotFound("instrument")
	}
	var raw []byte
	if err := db.pool.QueryRow(ctx, `SELECT billing_override FROM instruments WHERE id = $1`, instrumentID).Scan(&raw); err != nil {
		return o, mapError(err, "instrument")
	}
	return o, json.Unmarshal(raw, &o)
}

// SetInstrumentBillingOverride replaces an instrument's override and records it in
// the ledger under the instrument's id.
func (db *DB) SetInstrumentBillingOverride(ctx context.Context, instrumentID string, o scheduling.BillingPolicyOverride, actor string, now time.Time) error {
	if !accounts.ValidID(instrumentID) {
		return beamledger.NotFound("instrument")
	}
	raw, err := json.Marshal(o)
	if err != nil {
		return err
	}
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		tag, err := tx.Exec(ctx, `UPDATE instruments SET billing_override = $2 WHERE id = $1`, instrumentID, raw)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return beamledger.NotFound("instrument")
		}
		return appendChange(ctx, tx, actor, provenance.ActionCorrect, provenance.EntityBillingPolicy, instrumentID, now, o)
	})
	return mapError(err, "billing policy")
}

// billingOverrides returns every instrument's override that departs from the facility.
func billingOverrides(ctx context.Context, q querier) (map[string]scheduling.BillingPolicyOverride, error) {
	rows, err := q.Query(ctx, `SELECT id::text, billing_override FROM instruments WHERE billing_override <> '{}'`)
	if err != nil {
		return nil, err
	}
	out := map[string]scheduling.BillingPolicyOverride{}
	var id string
	var raw []byte
	_, err = pgx.ForEachRow(rows, []any{&id, &raw}, func() error {
		var o scheduling.BillingPolicyOverride
		if err := json.Unmarshal(raw, &o); err != nil {
			return fmt.Errorf("instrument %s billing override: %w", id, err)
		}
		out[id] = o
		return nil
	})
	return out, err
}

const rateScheduleSelect = `
SELECT s.id::text, s.instrument_id::text, s.effective_from, s.currency,
       json_agg(json_build_object('rate_class', r.rate_class, 'independent_hourly_minor', r.independent_hourly_minor,
           'assisted_hourly_minor', r.assisted_hourly_minor, 'training_hourly_minor', r.training_hourly_minor,
           'unattended_hourly_minor', r.unattended_hourly_minor, 'staff_hourly_minor', r.staff_hourly_minor)
           ORDER BY array_position(ARRAY['internal', 'external_academic', 'commercial'], r.rate_class))
FROM rate_schedules s JOIN rate_schedule_rates r ON r.schedule_id = s.id`

func scanRateSchedules(rows pgx.Rows) ([]scheduling.RateSchedule, error) {
	out := []scheduling.RateSchedule{}
	var s scheduling.RateSchedule
	var classes []byte
	_, err := pgx.ForEachRow(rows, []any{&s.ID, &s.InstrumentID, &s.EffectiveFrom, &s.Currency, &classes}, func() error {
		s.Classes = nil
		if err := json.Unmarshal(classes, &s.Classes); err != nil {
			return err
		}
		s.EffectiveFrom = s.EffectiveFrom.UTC()
		out = append(out, s)
		return nil
	})
	return out, err
}

// RateSchedules lists an instrument's schedules (every instrument's when
// instrumentID is empty) by instrument and effective instant.
func (db *DB) RateSchedules(ctx context.Context, instrumentID string) ([]scheduling.RateSchedule, error) {
	return rateSchedules(ctx, db.pool, instrumentID)
}

func rateSchedules(ctx context.Context, q querier, instrumentID string) ([]scheduling.RateSchedule, error) {
	if instrumentID != "" && !accounts.ValidID(instrumentID) {
		return nil, beamledger.NotFound("instrument")
	}
	rows, err := q.Query(ctx, rateScheduleSelect+`
WHERE $1 = '' OR s.instrument_id::text = $1
GROUP BY s.id ORDER BY s.instrument_id, s.effective_from`, instrumentID)
	if err != nil {
		return nil, mapError(err, "rate schedule")
	}
	out, err := scanRateSchedules(rows)
	return out, mapError(err, "rate schedule")
}

// CreateRateSchedule stores a new schedule (validated by the caller, including that it
// takes effect no earlier than now) with its ledger event. ErrConflict when the
// instrument already has one from the same instant.
func (db *DB) CreateRateSchedule(ctx context.Context, s scheduling.RateSchedule, actor string, now time.Time) (scheduling.RateSchedule, error) {
	if !accounts.ValidID(s.InstrumentID) {
		return s, beamledger.NotFound("instrument")
	}
	s.ID, s.EffectiveFrom = uuid.NewString(), s.EffectiveFrom.UTC().Truncate(time.Microsecond)
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if err := requireInstrument(ctx, tx, s.InstrumentID); err != nil {
			return err
		}
		const q = `INSERT INTO rate_schedules (id, instrument_id, effective_from, currency, created_by, created_at) VALUES ($1, $2, $3, $4, $5, $6)`
		if _, err := tx.Exec(ctx, q, s.ID, s.InstrumentID, s.EffectiveFrom, s.Currency, actor, now); err != nil {
			if isConstraint(err, "rate_schedules_instrument_id_effective_from_key") {
				return beamledger.Conflict("instrument %s already has a rate schedule from %s", s.InstrumentID, s.EffectiveFrom.Format(time.RFC3339))
			}
			return err
		}
		const r = `
INSERT INTO rate_schedule_rates (schedule_id, rate_class, independent_hourly_minor, assisted_hourly_minor,
    training_hourly_minor, unattended_hourly_minor, staff_hourly_minor) VALUES ($1, $2, $3, $4, $5, $6, $7)`
		for _, c := range s.Classes {
			if _, err := tx.Exec(ctx, r, s.ID, string(c.RateClass), c.IndependentHourlyMinor, c.AssistedHourlyMinor,
				c.TrainingHourlyMinor, c.UnattendedHourlyMinor, c.StaffHourlyMinor); err != nil {
				return err
			}
		}
		return appendChange(ctx, tx, actor, provenance.ActionCreate, provenance.EntityRateSchedule, s.ID, now, s)
	})
	return s, mapError(err, "rate schedule")
}

const fundingAccountColumns = `id::text, project_id::text, code, valid_from, valid_until, cap_minor, coalesce(rate_class, '')`

func scanFundingAccount(row pgx.Row) (scheduling.FundingAccount, error) {
	var a scheduling.FundingAccount
	var class string
	err := row.Scan(&a.ID, &a.ProjectID, &a.Code, &a.ValidFrom, &a.ValidUntil, &a.CapMinor, &class)
	a.RateClass = accounts.RateClass(class)
	return a, err
}

// FundingAccounts lists a project's accounts by code.
func (db *DB) FundingAccounts(ctx context.Context, projectID string) ([]scheduling.FundingAccount, error) {
	return fundingAccounts(ctx, db.pool, projectID)
}

func fundingAccounts(ctx context.Context, q querier, projectID string) ([]scheduling.FundingAccount, error) {
	if !accounts.ValidID(projectID) {
		return nil, beamledger.NotFound("project")
	}
	rows, err := q.Query(ctx, `SELECT `+fundingAccountColumns+` FROM funding_accounts WHERE project_id = $1 ORDER BY code`, projectID)
	if err != nil {
		return nil, mapError(err, "funding account")
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (scheduling.FundingAccount, error) { return scanFundingAccount(r) })
	if out == nil {
		out = []scheduling.FundingAccount{}
	}
	return out, mapError(err, "funding account")
}

// FundingAccount returns one account. ErrNotFound when there is none.
func (db *DB) FundingAccount(ctx context.Context, id string) (scheduling.FundingAccount, error) {
	if !accounts.ValidID(id) {
		return scheduling.FundingAccount{}, beamledger.NotFound("funding account")
	}
	a, err := scanFundingAccount(db.pool.QueryRow(ctx, `SELECT `+fundingAccountColumns+` FROM funding_accounts WHERE id = $1`, id))
	return a, mapError(err, "funding account")
}

// SaveFundingAccount creates the account (empty ID) or replaces its fields, with its
// ledger event. ErrConflict when the project already has an account with the code.
func (db *DB) SaveFundingAccount(ctx context.Context, a scheduling.FundingAccount, actor string, now time.Time) (scheduling.FundingAccount, error) {
	action := provenance.ActionCorrect
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var err error
		if a.ID == "" {
			action = provenance.ActionCreate
			const q = `
INSERT INTO funding_accounts (project_id, code, valid_from, valid_until, cap_minor, created_at, updated_at, rate_class)
VALUES ($1, $2, $3, $4, $5, $6, $6, nullif($7, '')) RETURNING ` + fundingAccountColumns
			a, err = scanFundingAccount(tx.QueryRow(ctx, q, a.ProjectID, a.Code, a.ValidFrom, a.ValidUntil, a.CapMinor, now, string(a.RateClass)))
		} else {
			const q = `
UPDATE funding_accounts SET code = $2, valid_from = $3, valid_until = $4, cap_minor = $5, updated_at = $6, rate_class = nullif($7, '')
WHERE id = $1 RETURNING ` + fundingAccountColumns
			a, err = scanFundingAccount(tx.QueryRow(ctx, q, a.ID, a.Code, a.ValidFrom, a.ValidUntil, a.CapMinor, now, string(a.RateClass)))
		}
		if isConstraint(err, "funding_accounts_project_id_code_key") {
			return beamledger.Conflict("the project already has a funding account with code %s", a.Code)
		}
		if err != nil {
			return err
		}
		return appendChange(ctx, tx, actor, action, provenance.EntityFundingAccount, a.ID, now, a)
	})
	return a, mapError(err, "funding account")
}

// fundingSplit reads a project's default split (table project_funding) or a booking's.
func fundingSplit(ctx context.Context, q querier, table, ownerColumn, ownerID string) ([]scheduling.FundingShare, error) {
	rows, err := q.Query(ctx, `SELECT account_id::text, basis_points FROM `+table+` WHERE `+ownerColumn+` = $1 ORDER BY position`, ownerID)
	if err != nil {
		return nil, err
	}
	out, err := pgx.CollectRows(rows, pgx.RowToStructByPos[scheduling.FundingShare])
	if out == nil {
		out = []scheduling.FundingShare{}
	}
	return out, err
}

// ProjectFunding returns a project's default split (empty when it has none).
func (db *DB) ProjectFunding(ctx context.Context, projectID string) ([]scheduling.FundingShare, error) {
	if !accounts.ValidID(projectID) {
		return nil, beamledger.NotFound("project")
	}
	out, err := fundingSplit(ctx, db.pool, "project_funding", "project_id", projectID)
	return out, mapError(err, "funding split")
}

// BookingFunding returns a booking's own split (empty when it has none).
func (db *DB) BookingFunding(ctx context.Context, bookingID string) ([]scheduling.FundingShare, error) {
	if !accounts.ValidID(bookingID) {
		return nil, beamledger.NotFound("booking")
	}
	out, err := fundingSplit(ctx, db.pool, "booking_funding", "booking_id", bookingID)
	return out, mapError(err, "funding split")
}

// SetProjectFunding replaces a project's default split (validated by the caller).
// ErrInvalid naming "funding" when an account is not the project's.
func (db *DB) SetProjectFunding(ctx context.Context, projectID string, shares []scheduling.FundingShare, actor string, now time.Time) error {
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `DELETE FROM project_funding WHERE project_id = $1`, projectID); err != nil {
			return err
		}
		for i, s := range shares {
			if !accounts.ValidID(s.AccountID) {
				return beamledger.InvalidField(fmt.Sprintf("funding[%d].account_id", i), "is not one of the project's funding accounts")
			}
			const q = `INSERT INTO project_funding (project_id, position, account_id, basis_points) VALUES ($1, $2, $3, $4)`
			if _, err := tx.Exec(ctx, q, projectID, i, s.AccountID, s.BasisPoints); err != nil {
				if isConstraint(err, "project_funding_project_id_account_id_fkey") {
					return beamledger.InvalidField(fmt.Sprintf("funding[%d].account_id", i), "is not one of the project's funding accounts")
				}
				return err
			}
		}
		return appendChange(ctx, tx, actor, provenance.ActionCorrect, provenance.EntityFundingSplit, projectID, now, shares)
	})
	return mapError(err, "funding split")
}

// SetBookingFunding replaces a booking's own split, refusing (RuleViolation
// "funding_account") an account that is not valid over the whole booking, or not the
// booking's project's (ErrInvalid naming the share), and (RuleViolation "funding_cap")
// a split that would promise a capped account more than its cap (checkFundingCaps,
// the booking's whole estimate counted as new to the split).
func (db *DB) SetBookingFunding(ctx context.Context, b scheduling.Booking, shares []scheduling.FundingShare, actor string, now time.Time) error {
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		accts, err := fundingAccounts(ctx, tx, b.ProjectID)
		if err != nil {
			return err
		}
		if err := scheduling.CheckFundingAt(shares, accts, b.Start, b.End); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, `DELETE FROM booking_funding WHERE booking_id = $1`, b.ID); err != nil {
			return err
		}
		for i, s := range shares {
			const q = `INSERT INTO booking_funding (booking_id, project_id, position, account_id, basis_points) VALUES ($1, $2, $3, $4, $5)`
			if _, err := tx.Exec(ctx, q, b.ID, b.ProjectID, i, s.AccountID, s.BasisPoints); err != nil {
				return err
			}
		}
		if b.Status == scheduling.StatusActive {
			if err := checkFundingCaps(ctx, tx, b, nil); err != nil {
				return err
			}
		}
		return appendChange(ctx, tx, actor, provenance.ActionCorrect, provenance.EntityFundingSplit, b.ID, now, shares)
	})
	return mapError(err, "funding split")
}

// CheckBookingFunding refuses a booking of [start, end) whose charges would go to an
// account not valid over all of it (see scheduling.CheckFundingAt), so that the
// refusal comes when the booking is made or moved, not at month end. The split looked
// at is the booking's own (bookingID, empty for a booking not yet made) or else the
// project's default. A project with neither is not checked here: its bookings need a
// split of their own, which is checked when it is set.
func (db *DB) CheckBookingFunding(ctx context.Context, projectID, bookingID string, start, end time.Time) error {
	if !accounts.ValidID(projectID) || (bookingID != "" && !accounts.ValidID(bookingID)) {
		return nil // the booking itself reports the project or booking
	}
	const q = `
WITH own AS (SELECT account_id, basis_points, position FROM booking_funding WHERE booking_id = nullif($2, '')::uuid),
split AS (
    SELECT account_id, basis_points, position FROM own
    UNION ALL
    SELECT account_id, basis_points, position FROM project_funding
    WHERE project_id = $1 AND NOT EXISTS (SELECT 1 FROM own))
SELECT s.account_id::text, s.basis_points, a.code, a.valid_from, a.valid_until
FROM split s JOIN funding_accounts a ON a.id = s.account_id ORDER BY s.position`
	rows, err := db.pool.Query(ctx, q, projectID, bookingID)
	if err != nil {
		return mapError(err, "funding split")
	}
	var shares []scheduling.FundingShare
	var accts []scheduling.FundingAccount
	var s scheduling.FundingShare
	var a scheduling.FundingAccount
	if _, err := pgx.ForEachRow(rows, []any{&s.AccountID, &s.BasisPoints, &a.Code, &a.ValidFrom, &a.ValidUntil}, func() error {
		a.ID = s.AccountID
		shares, accts = append(shares, s), append(accts, a)
		return nil
	}); err != nil {
		return mapError(err, "funding split")
	}
	return scheduling.CheckFundingAt(shares, accts, start, end)
}

// accountRateClasses reads the rate class of every funding account of the projects
// that carries its own (the others' shares are priced at their project's class).
func accountRateClasses(ctx context.Context, q querier, projectIDs []string) (map[string]accounts.RateClass, error) {
	rows, err := q.Query(ctx, `SELECT id::text, rate_class FROM funding_accounts
WHERE project_id = ANY($1::uuid[]) AND rate_class IS NOT NULL`, projectIDs)
	if err != nil {
		return nil, err
	}
	out := map[string]accounts.RateClass{}
	var id, class string
	_, err = pgx.ForEachRow(rows, []any{&id, &class}, func() error {
		out[id] = accounts.RateClass(class)
		return nil
	})
	return out, err
}
