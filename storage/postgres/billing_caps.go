package postgres

import (
	"context"
	"encoding/json"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// checkFundingCaps refuses (scheduling.CheckFundingCaps, RuleViolation "funding_cap")
// booking b, new (b.ID empty, previous nil) or moved from previous, when its estimated
// share would take a capped account of its split past the cap. It runs inside the
// booking's transaction after the booking rules passed, and locks the split's capped
// accounts first, so two bookings on one account are judged one after the other and
// cannot both take its last room. What an account has used is what issued statements
// charged to it plus the estimates of the project's other active bookings not on an
// issued statement (charged at their booked time under the policy in force) and the
// late-cancellation charges of its cancelled ones not yet issued either.
func checkFundingCaps(ctx context.Context, tx pgx.Tx, b scheduling.Booking, previous *scheduling.Booking) error {
	accts, err := fundingAccounts(ctx, tx, b.ProjectID)
	if err != nil {
		return err
	}
	projectSplit, err := fundingSplit(ctx, tx, "project_funding", "project_id", b.ProjectID)
	if err != nil {
		return err
	}
	split := projectSplit
	if b.ID != "" {
		own, err := fundingSplit(ctx, tx, "booking_funding", "booking_id", b.ID)
		if err != nil {
			return err
		}
		split = scheduling.FundingFor(own, projectSplit)
	}
	var capped []string
	for _, a := range accts {
		for _, s := range split {
			if s.AccountID == a.ID && a.CapMinor > 0 {
				capped = append(capped, a.ID)
			}
		}
	}
	if len(capped) == 0 {
		return nil
	}
	// Ordered row locks: two bookings on overlapping sets of accounts never wait on
	// each other the other way round. NO KEY UPDATE does not conflict with the key-share
	// locks that inserting a split's rows (foreign keys to the accounts) takes, so a
	// split being set, which checks its caps after writing its rows, cannot deadlock
	// with another.
	if _, err := tx.Exec(ctx, `SELECT 1 FROM funding_accounts WHERE id = ANY($1::uuid[]) ORDER BY id FOR NO KEY UPDATE`, capped); err != nil {
		return err
	}
	var class string
	if err := tx.QueryRow(ctx, `SELECT rate_class FROM projects WHERE id = $1`, b.ProjectID).Scan(&class); err != nil {
		return err
	}
	facility, err := facilityBillingPolicy(ctx, tx)
	if err != nil {
		return err
	}
	overrides, err := billingOverrides(ctx, tx)
	if err != nil {
		return err
	}
	schedules, err := rateSchedules(ctx, tx, "")
	if err != nil {
		return err
	}
	pricing := func(instrumentID string) scheduling.EstimatePricing {
		return scheduling.EstimatePricing{ProjectClass: accounts.RateClass(class), Schedules: schedules,
			Policy: facility.With(overrides[instrumentID])}
	}
	used, err := chargedToAccounts(ctx, tx, b.ProjectID, capped)
	if err != nil {
		return err
	}
	exclude := b.ID
	if previous != nil {
		exclude = previous.ID
	}
	if err := committedToAccounts(ctx, tx, b.ProjectID, exclude, projectSplit, accts, pricing, used); err != nil {
		return err
	}
	return scheduling.CheckFundingCaps(scheduling.FundingCapCheck{Booking: b, Previous: previous, Split: split,
		Accounts: accts, Pricing: pricing(b.InstrumentID), UsedMinor: used})
}

// chargedToAccounts sums, per account, what the project's issued statements posted to
// the accounts named.
func chargedToAccounts(ctx context.Context, q querier, projectID string, accountIDs []string) (map[string]int64, error) {
	const sql = `
SELECT e->>'account_id', sum((e->>'amount_minor')::bigint)::bigint
FROM statements s CROSS JOIN LATERAL jsonb_array_elements(s.account_totals) e
WHERE s.project_id = $1 AND s.status = 'issued' AND e->>'account_id' = ANY($2::text[])
GROUP BY 1`
	rows, err := q.Query(ctx, sql, projectID, accountIDs)
	if err != nil {
		return nil, err
	}
	out := map[string]int64{}
	var id string
	var sum int64
	_, err = pgx.ForEachRow(rows, []any{&id, &sum}, func() error {
		out[id] = sum
		return nil
	})
	return out, err
}

// committedToAccounts adds to used, per account, the estimated shares of the project's
// bookings (booking excludeID left out) that no issued statement has charged yet:
// those starting in a period without an issued statement of the project. An active
// booking commits its booked time; a cancelled one its late-cancellation charge, if
// any (less what others rebooked since). A booking that cannot be priced (no rate
// schedule in force over it) commits nothing.
func committedToAccounts(ctx context.Context, q querier, projectID, excludeID string, projectSplit []scheduling.FundingShare,
	accts []scheduling.FundingAccount, pricing func(string) scheduling.EstimatePricing, used map[string]int64) error {
	const sql = `
SELECT b.id::text, b.instrument_id::text, b.kind, lower(b.during), upper(b.during), b.status, b.cancelled_at,
       b.displaced_by IS NOT NULL, ` + rebookedMinutes + `,
       (SELECT json_agg(json_build_object('account_id', f.account_id, 'basis_points', f.basis_points) ORDER BY f.position)
        FROM booking_funding f WHERE f.booking_id = b.id)
FROM bookings b
WHERE b.project_id = $1 AND b.kind <> 'service' AND b.id::text <> $2
  AND NOT EXISTS (SELECT 1 FROM statements s WHERE s.project_id = b.project_id AND s.status = 'issued'
                  AND lower(b.during) >= s.period_start AND lower(b.during) < s.period_end)`
	rows, err := q.Query(ctx, sql, projectID, excludeID)
	if err != nil {
		return err
	}
	var b scheduling.Booking
	var kind, status string
	var start, end time.Time
	var displaced bool
	var rebooked int64
	var own []byte
	_, err = pgx.ForEachRow(rows, []any{&b.ID, &b.InstrumentID, &kind, &start, &end, &status, &b.CancelledAt, &displaced, &rebooked, &own}, func() error {
		b.Kind, b.Start, b.End, b.ProjectID = scheduling.BookingKind(kind), start.UTC(), end.UTC(), projectID
		b.Status = scheduling.BookingStatus(status)
		split := projectSplit
		if len(own) > 0 {
			split = nil
			if err := json.Unmarshal(own, &split); err != nil {
				return err
			}
		}
		var est map[string]int64
		var err error
		if b.Status == scheduling.StatusCancelled {
			est, err = scheduling.EstimateCancelledShares(b, int(rebooked), displaced, split, accts, pricing(b.InstrumentID))
		} else {
			est, err = scheduling.EstimateShares(b, split, accts, pricing(b.InstrumentID))
		}
		if err != nil {
			return nil // not priceable yet: nothing committed at known rates
		}
		for id, v := range est {
			used[id] += v
		}
		return nil
	})
	return err
}
