package scheduling

import (
	"errors"
	"math"
	"math/big"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"beamledger"
)

func amounts(as []Allocation) []int64 {
	out := make([]int64, len(as))
	for i, a := range as {
		out[i] = a.AmountMinor
	}
	return out
}

func TestSplitAmount(t *testing.T) {
	for _, c := range []struct {
		name   string
		amount int64
		shares []FundingShare
		want   []int64
	}{
		// [constructed] REFERENCE §3: 100.00 in thirds → 33.34, 33.33, 33.33.
		{"thirds", 10000, EqualShares("a", "b", "c"), []int64{3334, 3333, 3333}},
		// [constructed] REFERENCE §3: month total 1 550.00 split 50/30/20 → 775.00 / 465.00 / 310.00.
		{"50/30/20", 155000, []FundingShare{{"a", 5000}, {"b", 3000}, {"c", 2000}}, []int64{77500, 46500, 31000}},
		// [computed] 100.01 at 3334/3333/3333 bp: floors 3334, 3333, 3333 leave 1 for the first.
		{"remainder to the first", 10001, EqualShares("a", "b", "c"), []int64{3335, 3333, 3333}},
		// [computed] 0.02 in thirds: floors 0, 0, 0 leave 2, one each to the first two.
		{"two cents in thirds", 2, EqualShares("a", "b", "c"), []int64{1, 1, 0}},
		// [computed] a credit of 100.01 splits as its magnitude, negated.
		{"credit", -10001, EqualShares("a", "b", "c"), []int64{-3335, -3333, -3333}},
		// [computed] the remainder goes in the order given, not by size: 0.01 at 10/90 %.
		{"order not size", 1, []FundingShare{{"small", 1000}, {"big", 9000}}, []int64{1, 0}},
		// [computed] 0.10 at 50/25/25: 5 is exact, so the leftover unit of 2.5 + 2.5 goes
		// to the first inexact account: 5, 3, 2.
		{"exact share keeps its amount", 10, []FundingShare{{"a", 5000}, {"b", 2500}, {"c", 2500}}, []int64{5, 3, 2}},
		{"whole", 12345, []FundingShare{{"a", 10000}}, []int64{12345}},
		{"zero", 0, EqualShares("a", "b"), []int64{0, 0}},
	} {
		got, err := SplitAmount(c.amount, c.shares)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if !slices.Equal(amounts(got), c.want) {
			t.Errorf("%s: %v, want %v", c.name, amounts(got), c.want)
		}
	}
}

func TestValidateShares(t *testing.T) {
	var e *beamledger.Error
	for _, c := range []struct {
		name   string
		shares []FundingShare
		field  string
	}{
		{"none", nil, "funding"},
		{"under 100 %", []FundingShare{{"a", 5000}, {"b", 4999}}, "funding"},
		{"over 100 %", []FundingShare{{"a", 5000}, {"b", 5001}}, "funding"},
		{"zero share", []FundingShare{{"a", 10000}, {"b", 0}}, "funding[1].basis_points"},
		{"twice", []FundingShare{{"a", 5000}, {"a", 5000}}, "funding[1].account_id"},
		{"no id", []FundingShare{{"", 10000}}, "funding[0].account_id"},
	} {
		err := ValidateShares(c.shares)
		if !errors.As(err, &e) || !errors.Is(err, beamledger.ErrInvalid) || e.Fields[c.field] == "" {
			t.Errorf("%s: %v, want an error on %s", c.name, err, c.field)
		}
		if _, err := SplitAmount(100, c.shares); !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("%s: SplitAmount accepted it: %v", c.name, err)
		}
	}
	if err := ValidateShares(EqualShares("a", "b", "c", "d", "e", "f", "g")); err != nil {
		t.Errorf("EqualShares of seven: %v", err)
	}
}

// TestSplitProperties checks, over random amounts and shares, that a split sums exactly
// to the whole and that each part is within one minor unit of its exact share: rounding
// neither loses nor invents money, and moves at most one unit per account.
func TestSplitProperties(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	for i := 0; i < 20000; i++ {
		n := 1 + rng.IntN(7)
		cuts := make([]int64, n-1)
		for j := range cuts {
			cuts[j] = 1 + rng.Int64N(WholeBasisPoints-1)
		}
		cuts = append(cuts, 0, WholeBasisPoints)
		slices.Sort(cuts)
		var shares []FundingShare
		for j := 1; j < len(cuts); j++ {
			if d := cuts[j] - cuts[j-1]; d > 0 {
				shares = append(shares, FundingShare{AccountID: string(rune('a' + j)), BasisPoints: d})
			}
		}
		amount := rng.Int64N(2*maxAmountMinor) - maxAmountMinor
		if i%4 == 0 {
			amount = rng.Int64N(200) - 100 // small amounts, where remainders are most of it
		}
		got, err := SplitAmount(amount, shares)
		if err != nil {
			t.Fatalf("split %d of %v: %v", amount, shares, err)
		}
		var sum int64
		for j, a := range got {
			sum += a.AmountMinor
			exact := new(big.Rat).SetFrac(big.NewInt(amount*1), big.NewInt(1))
			exact.Mul(exact, big.NewRat(shares[j].BasisPoints, WholeBasisPoints))
			diff := new(big.Rat).Sub(new(big.Rat).SetInt64(a.AmountMinor), exact)
			if diff.Abs(diff).Cmp(big.NewRat(1, 1)) >= 0 {
				t.Fatalf("split %d of %v: part %d is %d, exact %s", amount, shares, j, a.AmountMinor, exact.FloatString(4))
			}
		}
		if sum != amount {
			t.Fatalf("split %d of %v sums to %d", amount, shares, sum)
		}
	}
}

func TestApportionRefusesNonsense(t *testing.T) {
	for _, c := range []struct {
		amount  int64
		weights []int64
	}{
		{100, nil}, {100, []int64{0, 0}}, {100, []int64{-1, 2}}, {math.MinInt64, []int64{1}},
		{100, []int64{math.MaxInt64, 1}},
	} {
		if _, ok := apportion(c.amount, c.weights); ok {
			t.Errorf("apportion(%d, %v) accepted", c.amount, c.weights)
		}
	}
	// [computed] zero weights get nothing, remainder included: 0.05 over 0/1/1.
	if got, ok := apportion(5, []int64{0, 1, 1}); !ok || !slices.Equal(got, []int64{0, 3, 2}) {
		t.Errorf("zero weight: %v", got)
	}
}

func TestFundingAccountStanding(t *testing.T) {
	from, until := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC), time.Date(2027, 1, 1, 0, 0, 0, 0, time.UTC)
	a := FundingAccount{ID: "fa-1", ProjectID: "p-1", Code: "GR-17", ValidFrom: &from, ValidUntil: &until, CapMinor: 100000}
	if err := a.Validate(); err != nil {
		t.Fatal(err)
	}
	mid := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	// [constructed] an account valid through 2026 with a cap of 1 000.00.
	for _, c := range []struct {
		name    string
		at      time.Time
		charged int64
		want    AccountStanding
	}{
		{"before", from.Add(-time.Second), 0, AccountStanding{Reason: "not_yet_valid", Capped: true, RoomMinor: 100000}},
		{"first instant", from, 0, AccountStanding{Open: true, Capped: true, RoomMinor: 100000}},
		{"partly used", mid, 64000, AccountStanding{Open: true, Capped: true, RoomMinor: 36000}},
		{"used up", mid, 100000, AccountStanding{Reason: "cap_reached", Capped: true}},
		{"over", mid, 120000, AccountStanding{Reason: "cap_reached", Capped: true}},
		{"last instant", until.Add(-time.Nanosecond), 0, AccountStanding{Open: true, Capped: true, RoomMinor: 100000}},
		{"expired", until, 0, AccountStanding{Reason: "expired", Capped: true, RoomMinor: 100000}},
	} {
		if got := a.StandingAt(c.at, c.charged); got != c.want {
			t.Errorf("%s: %+v, want %+v", c.name, got, c.want)
		}
	}
	open := FundingAccount{ID: "fa-2", ProjectID: "p-1", Code: "CC-1"}
	if got := open.StandingAt(mid, 1<<40); !got.Open || got.Capped {
		t.Errorf("uncapped open-ended account: %+v", got)
	}
	var e *beamledger.Error
	for _, c := range []struct {
		name            string
		at              time.Time
		charged, amount int64
		refused         bool
	}{
		{"fits", mid, 64000, 36000, false},
		{"one unit over", mid, 64000, 36001, true},
		{"expired", until, 0, 1, true},
		{"not yet", from.Add(-time.Hour), 0, 1, true},
	} {
		err := a.CheckCharge(c.at, c.charged, c.amount)
		if refused := errors.As(err, &e) && e.Rule == "funding_account"; refused != c.refused || (err != nil) != c.refused {
			t.Errorf("%s: %v, refused want %v", c.name, err, c.refused)
		}
	}
	bad := FundingAccount{ValidFrom: &until, ValidUntil: &from, CapMinor: -1}
	if err := bad.Validate(); !errors.As(err, &e) || len(e.Fields) != 4 {
		t.Errorf("bad account: %v", err)
	}
}
