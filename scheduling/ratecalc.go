package scheduling

import (
	"fmt"
	"math/big"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// RateInputs are a year's costs and projections for one instrument, from which its
// hourly rates are set (REFERENCE §3 [published: 2 CFR 200.468]: rates from actual
// costs, recovering aggregate costs only, with over- or under-recovery carried into the
// next period). Money is minor units; shares and rates are basis points (10000 = 100 %).
type RateInputs struct {
	ServiceContractMinor   int64 `json:"service_contract_minor"`
	SalaryMinor            int64 `json:"salary_minor"`              // the staff member's annual salary
	SalaryShareBasisPoints int64 `json:"salary_share_basis_points"` // the share of it spent on the instrument
	FringeRateBasisPoints  int64 `json:"fringe_rate_basis_points"`  // on the salary share
	SuppliesMinor          int64 `json:"supplies_minor"`
	PurchaseMinor          int64 `json:"purchase_minor"`
	// FederalShareMinor is the part of the purchase the federal government paid, which
	// depreciation excludes (REFERENCE §3 [published: 2 CFR 200.436]).
	FederalShareMinor int64 `json:"federal_share_minor"`
	UsefulLifeYears   int64 `json:"useful_life_years"`
	// PriorPeriodBalanceMinor carries last period's result: positive for a deficit
	// (under-recovery) to recover, negative for a surplus to give back.
	PriorPeriodBalanceMinor int64 `json:"prior_period_balance_minor"`
	// ProjectedBillableHours counts all projected use, discounted use included
	// (REFERENCE §3), so a discount is not recovered from other users.
	ProjectedBillableHours int64 `json:"projected_billable_hours"`
	// SubsidyMinor is the institution's contribution, which lowers the internal rate only.
	SubsidyMinor int64 `json:"subsidy_minor"`
	// FAndABasisPoints is the institution's F&A rate, added for external academic users.
	FAndABasisPoints int64 `json:"f_and_a_basis_points"`
	// CommercialMultiplierBasisPoints multiplies the external academic rate for
	// commercial users: 15000 is 1.5 ×; at least 10000, as commercial users pay at least
	// the external academic rate (REFERENCE §3 [practice]).
	CommercialMultiplierBasisPoints int64 `json:"commercial_multiplier_basis_points"`
}

// RateCalculation is the cost pool and the hourly rates per class derived from
// RateInputs. Every figure is computed exactly from the inputs and rounded half up to
// the minor unit only where it is reported, so the parts shown may differ from the
// rounded total by a unit, and no rate carries the rounding of another.
type RateCalculation struct {
	SalaryShareMinor  int64 `json:"salary_share_minor"`
	FringeMinor       int64 `json:"fringe_minor"`
	DepreciationMinor int64 `json:"depreciation_minor"`
	DirectCostsMinor  int64 `json:"direct_costs_minor"`
	CostPoolMinor     int64 `json:"cost_pool_minor"` // direct costs plus the prior-period balance
	// FullCostHourlyMinor is the pool over the projected hours, before any subsidy.
	FullCostHourlyMinor int64 `json:"full_cost_hourly_minor"`
	// InternalHourlyMinor is the pool less the subsidy over the projected hours.
	InternalHourlyMinor int64 `json:"internal_hourly_minor"`
	// ExternalAcademicHourlyMinor is the full-cost rate plus F&A: the subsidy is the
	// institution's own, for its own users.
	ExternalAcademicHourlyMinor int64 `json:"external_academic_hourly_minor"`
	// CommercialHourlyMinor is the external academic rate times the multiplier.
	CommercialHourlyMinor int64 `json:"commercial_hourly_minor"`
}

// CalculateRates derives the hourly rates. Arithmetic is exact (math/big.Rat) and each
// result is rounded half up to the minor unit at the end. ErrInvalid names the field
// when an input is out of range, or when the pool (less the subsidy) is negative, as a
// surplus larger than the year's costs leaves nothing to charge for.
func CalculateRates(in RateInputs) (RateCalculation, error) {
	if err := in.validate(); err != nil {
		return RateCalculation{}, err
	}
	r := func(v int64) *big.Rat { return new(big.Rat).SetInt64(v) }
	bp := func(v int64) *big.Rat { return big.NewRat(v, WholeBasisPoints) }
	mul := func(a, b *big.Rat) *big.Rat { return new(big.Rat).Mul(a, b) }
	add := func(xs ...*big.Rat) *big.Rat {
		s := new(big.Rat)
		for _, x := range xs {
			s.Add(s, x)
		}
		return s
	}
	salaryShare := mul(r(in.SalaryMinor), bp(in.SalaryShareBasisPoints))
	fringe := mul(salaryShare, bp(in.FringeRateBasisPoints))
	depreciation := new(big.Rat)
	if in.UsefulLifeYears > 0 {
		depreciation.SetFrac64(in.PurchaseMinor-in.FederalShareMinor, in.UsefulLifeYears)
	}
	direct := add(r(in.ServiceContractMinor), salaryShare, fringe, r(in.SuppliesMinor), depreciation)
	pool := add(direct, r(in.PriorPeriodBalanceMinor))
	subsidised := add(pool, r(-in.SubsidyMinor))
	if subsidised.Sign() < 0 {
		return RateCalculation{}, beamledger.InvalidField("subsidy_minor",
			"leaves a negative cost pool; the subsidy and any surplus may not exceed the year's costs")
	}
	perHour := func(x *big.Rat) *big.Rat { return new(big.Rat).Quo(x, r(in.ProjectedBillableHours)) }
	full := perHour(pool)
	external := mul(full, add(r(1), bp(in.FAndABasisPoints)))
	commercial := mul(external, bp(in.CommercialMultiplierBasisPoints))
	out := RateCalculation{}
	for _, f := range []struct {
		dst *int64
		v   *big.Rat
	}{
		{&out.SalaryShareMinor, salaryShare}, {&out.FringeMinor, fringe}, {&out.DepreciationMinor, depreciation},
		{&out.DirectCostsMinor, direct}, {&out.CostPoolMinor, pool}, {&out.FullCostHourlyMinor, full},
		{&out.InternalHourlyMinor, perHour(subsidised)}, {&out.ExternalAcademicHourlyMinor, external},
		{&out.CommercialHourlyMinor, commercial},
	} {
		*f.dst = roundHalfUp(f.v)
	}
	return out, nil
}

// roundHalfUp rounds to the nearest integer, halves toward +∞: ⌊x + ½⌋. The inputs'
// bounds keep every result within int64.
func roundHalfUp(x *big.Rat) int64 {
	num := new(big.Int).Mul(x.Num(), big.NewInt(2))
	num.Add(num, x.Denom())
	den := new(big.Int).Mul(x.Denom(), big.NewInt(2))
	return new(big.Int).Div(num, den).Int64() // Euclidean division: the floor for den > 0
}

// validate checks the inputs' ranges. The bounds are generous for any instrument and
// keep the results inside int64.
func (in RateInputs) validate() error {
	fe := beamledger.FieldErrors{}
	between := func(field string, v, lo, hi int64) {
		if v < lo || v > hi {
			fe.Add(field, fmt.Sprintf("must be between %d and %d", lo, hi))
		}
	}
	for _, m := range []struct {
		field string
		v     int64
	}{
		{"service_contract_minor", in.ServiceContractMinor}, {"salary_minor", in.SalaryMinor},
		{"supplies_minor", in.SuppliesMinor}, {"purchase_minor", in.PurchaseMinor},
		{"federal_share_minor", in.FederalShareMinor}, {"subsidy_minor", in.SubsidyMinor},
	} {
		between(m.field, m.v, 0, maxAmountMinor)
	}
	between("prior_period_balance_minor", in.PriorPeriodBalanceMinor, -maxAmountMinor, maxAmountMinor)
	if in.FederalShareMinor > in.PurchaseMinor {
		fe.Add("federal_share_minor", "must not exceed purchase_minor")
	}
	between("useful_life_years", in.UsefulLifeYears, 0, 100)
	if in.UsefulLifeYears == 0 && in.PurchaseMinor > in.FederalShareMinor {
		fe.Add("useful_life_years", "is required to depreciate the purchase")
	}
	between("salary_share_basis_points", in.SalaryShareBasisPoints, 0, WholeBasisPoints)
	between("fringe_rate_basis_points", in.FringeRateBasisPoints, 0, WholeBasisPoints)
	between("f_and_a_basis_points", in.FAndABasisPoints, 0, 3*WholeBasisPoints)
	between("commercial_multiplier_basis_points", in.CommercialMultiplierBasisPoints, WholeBasisPoints, 10*WholeBasisPoints)
	// A year has 8784 hours at most; more cannot be billed on one instrument.
	between("projected_billable_hours", in.ProjectedBillableHours, 1, 8784)
	return fe.Err()
}

// ScheduleOptions are what a rate schedule needs beyond the calculated rates.
type ScheduleOptions struct {
	InstrumentID  string    `json:"instrument_id"`
	EffectiveFrom time.Time `json:"effective_from"`
	Currency      string    `json:"currency"`
	// StaffHourlyMinor is the internal staff rate; external academic users pay it plus
	// F&A and commercial users that times the multiplier, as for instrument time.
	StaffHourlyMinor int64 `json:"staff_hourly_minor"`
	// UnattendedBasisPoints prices unattended time as a share of the class's rate
	// (5000 = half); 0 means the full rate.
	UnattendedBasisPoints int64 `json:"unattended_basis_points"`
}

// Schedule turns a calculation into a rate schedule: each class's rate for
// independent, assisted and training time, the unattended share of it, and the staff
// rate marked up as the class's instrument rate is. Each derived rate is rounded half up
// once, from exact values.
func (c RateCalculation) Schedule(in RateInputs, o ScheduleOptions) (RateSchedule, error) {
	if o.StaffHourlyMinor < 0 || o.StaffHourlyMinor > maxHourlyRateMinor {
		return RateSchedule{}, beamledger.InvalidField("save.staff_hourly_minor", "must be between 0 and 10^10 minor units an hour")
	}
	if o.UnattendedBasisPoints < 0 || o.UnattendedBasisPoints > WholeBasisPoints {
		return RateSchedule{}, beamledger.InvalidField("save.unattended_basis_points", "must be between 0 and 10000")
	}
	unattended := o.UnattendedBasisPoints
	if unattended == 0 {
		unattended = WholeBasisPoints
	}
	bp := func(v int64) *big.Rat { return big.NewRat(v, WholeBasisPoints) }
	external := new(big.Rat).Add(big.NewRat(1, 1), bp(in.FAndABasisPoints))
	commercial := new(big.Rat).Mul(external, bp(in.CommercialMultiplierBasisPoints))
	scale := func(v int64, f *big.Rat) int64 { return roundHalfUp(new(big.Rat).Mul(new(big.Rat).SetInt64(v), f)) }
	class := func(rc accounts.RateClass, rate int64, staff *big.Rat) ClassRates {
		return ClassRates{RateClass: rc, IndependentHourlyMinor: rate, AssistedHourlyMinor: rate, TrainingHourlyMinor: rate,
			UnattendedHourlyMinor: scale(rate, bp(unattended)), StaffHourlyMinor: scale(o.StaffHourlyMinor, staff)}
	}
	s := RateSchedule{InstrumentID: o.InstrumentID, EffectiveFrom: o.EffectiveFrom, Currency: o.Currency, Classes: []ClassRates{
		class(accounts.RateInternal, c.InternalHourlyMinor, big.NewRat(1, 1)),
		class(accounts.RateExternalAcademic, c.ExternalAcademicHourlyMinor, external),
		class(accounts.RateCommercial, c.CommercialHourlyMinor, commercial),
	}}
	return s, s.Validate()
}
