package scheduling

import (
	"fmt"
	"strings"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// WholeBasisPoints is 100 % in basis points (hundredths of a percent), what the shares of
// a split must sum to. Basis points keep shares whole numbers, so a split never needs a
// fraction to be stored or compared.
const WholeBasisPoints = 10_000

// FundingShare is one funding account's part of a project's charges.
type FundingShare struct {
	AccountID   string `json:"account_id"`
	BasisPoints int64  `json:"basis_points"`
}

// ValidateShares checks that shares name distinct accounts, each with a positive share,
// and sum to exactly 100 %: a split that covers less would leave part of a charge
// unpaid, one that covers more would invent money.
func ValidateShares(shares []FundingShare) error {
	// Every charge of a statement is split, most often to one account for all of it:
	// that case is checked without building the field errors.
	if len(shares) == 1 && shares[0].BasisPoints == WholeBasisPoints && strings.TrimSpace(shares[0].AccountID) != "" {
		return nil
	}
	fe := beamledger.FieldErrors{}
	if len(shares) == 0 {
		fe.Add("funding", "at least one funding account is required")
	}
	seen := map[string]bool{}
	var sum int64
	for i, s := range shares {
		at := fmt.Sprintf("funding[%d].", i)
		if strings.TrimSpace(s.AccountID) == "" {
			fe.Add(at+"account_id", "is required")
		} else if seen[s.AccountID] {
			fe.Add(at+"account_id", "appears twice; give the account one share")
		}
		seen[s.AccountID] = true
		if s.BasisPoints < 1 || s.BasisPoints > WholeBasisPoints {
			fe.Add(at+"basis_points", "must be between 1 and 10000 (0.01 % to 100 %)")
			continue
		}
		sum += s.BasisPoints
	}
	if len(shares) > 0 && sum != WholeBasisPoints {
		fe.Add("funding", fmt.Sprintf("shares must sum to 10000 basis points (100 %%), not %d", sum))
	}
	return fe.Err()
}

// EqualShares splits 100 % evenly across the accounts, the basis points that do not
// divide evenly going one each to the first accounts, as minor units do in SplitAmount:
// three accounts get 3334, 3333 and 3333.
func EqualShares(accountIDs ...string) []FundingShare {
	if len(accountIDs) == 0 {
		return nil
	}
	n := int64(len(accountIDs))
	out := make([]FundingShare, len(accountIDs))
	for i, id := range accountIDs {
		out[i] = FundingShare{AccountID: id, BasisPoints: WholeBasisPoints / n}
		if int64(i) < WholeBasisPoints%n {
			out[i].BasisPoints++
		}
	}
	return out
}

// Allocation is the part of an amount posted to one funding account.
type Allocation struct {
	AccountID   string `json:"account_id"`
	AmountMinor int64  `json:"amount_minor"`
}

// SplitAmount divides an amount across funding accounts by their shares in whole minor
// units: each gets ⌊amount × share ÷ 10000⌋ and the units left over go one each to the
// accounts in the order given (REFERENCE §3: the remainder to the accounts in order),
// skipping an account whose share came out exact, so no account is ever more than one
// minor unit from its exact share.
// The allocations always sum to the amount. A credit (negative amount) splits as its
// magnitude does, negated. Shares must pass ValidateShares; ErrInvalid otherwise.
func SplitAmount(amountMinor int64, shares []FundingShare) ([]Allocation, error) {
	if err := ValidateShares(shares); err != nil {
		return nil, err
	}
	weights := make([]int64, len(shares))
	for i, s := range shares {
		weights[i] = s.BasisPoints
	}
	parts, ok := apportion(amountMinor, weights)
	if !ok {
		return nil, beamledger.InvalidField("amount_minor", "is outside the range money may take")
	}
	out := make([]Allocation, len(shares))
	for i, s := range shares {
		out[i] = Allocation{AccountID: s.AccountID, AmountMinor: parts[i]}
	}
	return out, nil
}

// FundingAccount is a grant or cost centre a project's charges are posted to. It may be
// charged from ValidFrom (inclusive) until ValidUntil (exclusive), either open-ended when
// nil, and up to CapMinor in total (0 means no cap).
type FundingAccount struct {
	ID         string     `json:"id"`
	ProjectID  string     `json:"project_id"`
	Code       string     `json:"code"` // the finance system's reference
	ValidFrom  *time.Time `json:"valid_from,omitempty"`
	ValidUntil *time.Time `json:"valid_until,omitempty"`
	CapMinor   int64      `json:"cap_minor"`
	// RateClass, when set, is the class this account's share of every charge is priced
	// at (an external grant on an internal project pays external rates); empty means
	// the project's class.
	RateClass accounts.RateClass `json:"rate_class,omitempty"`
}

// Validate checks an account, naming offending fields.
func (a FundingAccount) Validate() error {
	fe := beamledger.FieldErrors{}
	if strings.TrimSpace(a.ProjectID) == "" {
		fe.Add("project_id", "is required")
	}
	if strings.TrimSpace(a.Code) == "" {
		fe.Add("code", "is required")
	}
	if a.ValidFrom != nil && a.ValidUntil != nil && !a.ValidFrom.Before(*a.ValidUntil) {
		fe.Add("valid_until", "must be after valid_from")
	}
	if a.CapMinor < 0 || a.CapMinor > maxAmountMinor {
		fe.Add("cap_minor", fmt.Sprintf("must be between 0 (no cap) and %d", int64(maxAmountMinor)))
	}
	if a.RateClass != "" && !a.RateClass.Valid() {
		fe.Add("rate_class", "must be one of internal, external_academic, commercial, or empty for the project's class")
	}
	return fe.Err()
}

// AccountStanding is whether an account may be charged at an instant, and how much.
type AccountStanding struct {
	// Open is true inside the validity dates with room left under the cap.
	Open bool `json:"open"`
	// Reason says why not: "not_yet_valid", "expired" or "cap_reached"; "" when open.
	Reason string `json:"reason,omitempty"`
	// Capped says RoomMinor is a limit; an uncapped account has unlimited room.
	Capped    bool  `json:"capped"`
	RoomMinor int64 `json:"room_minor"`
}

// StandingAt judges the account at an instant, given what has already been charged to
// it. It is pure so that a booking can be refused when it is made, not found unpayable
// at month end.
func (a FundingAccount) StandingAt(at time.Time, chargedMinor int64) AccountStanding {
	s := AccountStanding{Open: true, Capped: a.CapMinor > 0}
	if s.Capped {
		s.RoomMinor = max(a.CapMinor-chargedMinor, 0)
	}
	switch {
	case a.ValidFrom != nil && at.Before(*a.ValidFrom):
		s.Open, s.Reason = false, "not_yet_valid"
	case a.ValidUntil != nil && !at.Before(*a.ValidUntil):
		s.Open, s.Reason = false, "expired"
	case s.Capped && s.RoomMinor == 0:
		s.Open, s.Reason = false, "cap_reached"
	}
	return s
}

// CheckCharge refuses, as RuleViolation "funding_account", a charge of amountMinor at
// an instant the account is not valid, or one that would pass its cap.
func (a FundingAccount) CheckCharge(at time.Time, chargedMinor, amountMinor int64) error {
	s := a.StandingAt(at, chargedMinor)
	switch {
	case s.Reason == "not_yet_valid":
		return beamledger.RuleViolation("funding_account", "funding account "+a.Code+" may not be charged before "+a.ValidFrom.UTC().Format(time.RFC3339),
			map[string]string{"account_id": "is not valid yet"})
	case s.Reason == "expired":
		return beamledger.RuleViolation("funding_account", "funding account "+a.Code+" expired at "+a.ValidUntil.UTC().Format(time.RFC3339),
			map[string]string{"account_id": "has expired"})
	case s.Capped && amountMinor > s.RoomMinor:
		return beamledger.RuleViolation("funding_account", fmt.Sprintf("funding account %s has %d minor units left under its cap, less than %d", a.Code, s.RoomMinor, amountMinor),
			map[string]string{"account_id": "has too little left under its cap"})
	}
	return nil
}
