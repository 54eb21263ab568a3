package scheduling

import (
	"errors"
	"math/big"
	"testing"

	"beamledger"
)

// refRateInputs is REFERENCE §3's [constructed] rate-setting example, in cents.
func refRateInputs() RateInputs {
	return RateInputs{
		ServiceContractMinor: 9_600_000, SalaryMinor: 8_400_000, SalaryShareBasisPoints: 5000,
		FringeRateBasisPoints: 3100, SuppliesMinor: 1_098_000, PurchaseMinor: 120_000_000,
		FederalShareMinor: 72_000_000, UsefulLifeYears: 10, PriorPeriodBalanceMinor: 1_400_000,
		ProjectedBillableHours: 1600, SubsidyMinor: 3_200_000, FAndABasisPoints: 5500,
		CommercialMultiplierBasisPoints: 15000,
	}
}

func TestCalculateRatesReferenceExample(t *testing.T) {
	got, err := CalculateRates(refRateInputs())
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name      string
		got, want int64
	}{
		{"salary share", got.SalaryShareMinor, 4_200_000},    // [constructed] REFERENCE §3: 0.5 × 84 000 = 42 000
		{"fringe", got.FringeMinor, 1_302_000},               // [constructed] REFERENCE §3: fringe 31 % = 13 020
		{"depreciation", got.DepreciationMinor, 4_800_000},   // [constructed] REFERENCE §3: (1 200 000 − 720 000) ÷ 10 y = 48 000
		{"direct costs", got.DirectCostsMinor, 21_000_000},   // [constructed] REFERENCE §3: direct costs 210 000
		{"cost pool", got.CostPoolMinor, 22_400_000},         // [constructed] REFERENCE §3: + 14 000 deficit → pool 224 000
		{"full cost", got.FullCostHourlyMinor, 14000},        // [constructed] REFERENCE §3: ÷ 1 600 h → 140.00
		{"internal", got.InternalHourlyMinor, 12000},         // [constructed] REFERENCE §3: with a 32 000 subsidy → 120.00
		{"external", got.ExternalAcademicHourlyMinor, 21700}, // [constructed] REFERENCE §3: external academic at 55 % F&A → 217.00
		{"commercial", got.CommercialHourlyMinor, 32550},     // [constructed] REFERENCE §3: commercial at 1.5 × external → 325.50
	} {
		if c.got != c.want {
			t.Errorf("%s: %d, want %d", c.name, c.got, c.want)
		}
	}
}

func TestCalculateRatesExactUntilTheEnd(t *testing.T) {
	in := RateInputs{ServiceContractMinor: 10000, ProjectedBillableHours: 3, FAndABasisPoints: 5500,
		CommercialMultiplierBasisPoints: 15000, SubsidyMinor: 1}
	got, err := CalculateRates(in)
	if err != nil {
		t.Fatal(err)
	}
	// [computed] 10000 ÷ 3 = 3333.33… → 3333; 9999 ÷ 3 = 3333 exactly.
	// External: exactly 10000 × 1.55 ÷ 3 = 5166.67 → 5167, where rounding the full-cost
	// rate first would give 3333 × 1.55 = 5166.15 → 5166. Commercial: 15500 × 1.5 ÷ 3 =
	// 7750 exactly, where 5167 × 1.5 = 7750.5 would round to 7751.
	if got.FullCostHourlyMinor != 3333 || got.InternalHourlyMinor != 3333 || got.ExternalAcademicHourlyMinor != 5167 || got.CommercialHourlyMinor != 7750 {
		t.Errorf("got %+v", got)
	}
	// [computed] half a minor unit rounds up: 1 ÷ 2 h = 0.5 → 1; 5 ÷ 2 = 2.5 → 3; 7 ÷ 4 = 1.75 → 2.
	for _, c := range []struct{ pool, hours, want int64 }{{1, 2, 1}, {5, 2, 3}, {7, 4, 2}, {3, 4, 1}, {1, 3, 0}} {
		got, err := CalculateRates(RateInputs{SuppliesMinor: c.pool, ProjectedBillableHours: c.hours, CommercialMultiplierBasisPoints: WholeBasisPoints})
		if err != nil || got.InternalHourlyMinor != c.want {
			t.Errorf("%d ÷ %d h: %d, %v; want %d", c.pool, c.hours, got.InternalHourlyMinor, err, c.want)
		}
	}
}

func TestRoundHalfUp(t *testing.T) {
	for _, c := range []struct {
		num, den, want int64
	}{
		// [computed] halves go toward +∞, everything else to the nearest.
		{5, 2, 3}, {-5, 2, -2}, {7, 3, 2}, {-7, 3, -2}, {8, 3, 3}, {0, 1, 0}, {-1, 2, 0},
	} {
		if got := roundHalfUp(big.NewRat(c.num, c.den)); got != c.want {
			t.Errorf("roundHalfUp(%d/%d) = %d, want %d", c.num, c.den, got, c.want)
		}
	}
}

func TestCalculateRatesRefuses(t *testing.T) {
	var e *beamledger.Error
	for _, c := range []struct {
		name  string
		edit  func(*RateInputs)
		field string
	}{
		{"no hours", func(in *RateInputs) { in.ProjectedBillableHours = 0 }, "projected_billable_hours"},
		{"federal share over purchase", func(in *RateInputs) { in.FederalShareMinor = in.PurchaseMinor + 1 }, "federal_share_minor"},
		{"no useful life", func(in *RateInputs) { in.UsefulLifeYears = 0 }, "useful_life_years"},
		{"commercial below external", func(in *RateInputs) { in.CommercialMultiplierBasisPoints = 9999 }, "commercial_multiplier_basis_points"},
		{"salary share over 100 %", func(in *RateInputs) { in.SalaryShareBasisPoints = 10001 }, "salary_share_basis_points"},
		{"negative supplies", func(in *RateInputs) { in.SuppliesMinor = -1 }, "supplies_minor"},
		{"subsidy beyond the pool", func(in *RateInputs) { in.SubsidyMinor = 22_400_001 }, "subsidy_minor"},
	} {
		in := refRateInputs()
		c.edit(&in)
		_, err := CalculateRates(in)
		if !errors.As(err, &e) || !errors.Is(err, beamledger.ErrInvalid) || e.Fields[c.field] == "" {
			t.Errorf("%s: %v, want an error on %s", c.name, err, c.field)
		}
	}
	// [constructed] a subsidy of exactly the pool makes internal use free.
	in := refRateInputs()
	in.SubsidyMinor = 22_400_000
	if got, err := CalculateRates(in); err != nil || got.InternalHourlyMinor != 0 || got.ExternalAcademicHourlyMinor != 21700 {
		t.Errorf("whole pool subsidised: %+v, %v", got, err)
	}
}
