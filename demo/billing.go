package demo

import (
	"context"
	"errors"
	"fmt"
	"time"

	"beamledger"
	"beamledger/scheduling"
)

// BillingStores is what loading the demo's cost recovery needs from storage.
type BillingStores interface {
	RateSchedules(ctx context.Context, instrumentID string) ([]scheduling.RateSchedule, error)
	CreateRateSchedule(ctx context.Context, s scheduling.RateSchedule, actor string, now time.Time) (scheduling.RateSchedule, error)
	FacilityBillingPolicy(ctx context.Context) (scheduling.BillingPolicy, error)
	SetFacilityBillingPolicy(ctx context.Context, p scheduling.BillingPolicy, actor string, now time.Time) error
	SaveFundingAccount(ctx context.Context, a scheduling.FundingAccount, actor string, now time.Time) (scheduling.FundingAccount, error)
	SetProjectFunding(ctx context.Context, projectID string, shares []scheduling.FundingShare, actor string, now time.Time) error
	AddCostEntry(ctx context.Context, e scheduling.CostEntry) (scheduling.CostEntry, error)
	ComputeStatement(ctx context.Context, projectID string, from, to time.Time, actor string, now time.Time) (scheduling.Statement, bool, error)
	IssueStatement(ctx context.Context, id, actor string, now time.Time) (scheduling.Statement, error)
	scheduling.UsageStore
}

// demoCosts are each instrument's invented annual costs, in cents, from which the
// calculator sets its rates.
var demoCosts = map[string]scheduling.RateInputs{
	"STEM-CORR": {ServiceContractMinor: 21_000_000, SalaryMinor: 7_800_000, SalaryShareBasisPoints: 6000, FringeRateBasisPoints: 3000,
		SuppliesMinor: 1_500_000, PurchaseMinor: 420_000_000, FederalShareMinor: 150_000_000, UsefulLifeYears: 10,
		ProjectedBillableHours: 2000, SubsidyMinor: 12_000_000, FAndABasisPoints: 5200, CommercialMultiplierBasisPoints: 15000},
	"TEM-200": {ServiceContractMinor: 8_500_000, SalaryMinor: 7_200_000, SalaryShareBasisPoints: 3000, FringeRateBasisPoints: 3000,
		SuppliesMinor: 900_000, PurchaseMinor: 110_000_000, UsefulLifeYears: 10,
		ProjectedBillableHours: 1800, SubsidyMinor: 3_000_000, FAndABasisPoints: 5200, CommercialMultiplierBasisPoints: 15000},
	"FIB-SEM": {ServiceContractMinor: 9_000_000, SalaryMinor: 7_200_000, SalaryShareBasisPoints: 3000, FringeRateBasisPoints: 3000,
		SuppliesMinor: 2_400_000, PurchaseMinor: 160_000_000, FederalShareMinor: 40_000_000, UsefulLifeYears: 8,
		ProjectedBillableHours: 1600, FAndABasisPoints: 5200, CommercialMultiplierBasisPoints: 15000},
}

// demoSession is a recurring booking of last month: weekday (Monday = 0), start hour
// and length, on an instrument for a project.
type demoSession struct {
	instrument, user, project string
	kind                      scheduling.BookingKind
	weekday, from, hours      int
	usedLateMin, usedLessMin  int // check-in that many minutes late, check-out that many early (negative: overrun)
}

var lastMonth = []demoSession{
	{"STEM-CORR", "researcher@demo.example", "SSB-INTERFACE", scheduling.KindIndependent, 0, 9, 4, 10, 5},
	{"STEM-CORR", "researcher2@demo.example", "CERIA-SAC", scheduling.KindAssisted, 1, 13, 3, 0, 0},
	{"STEM-CORR", "researcher@demo.example", "SSB-INTERFACE", scheduling.KindUnattended, 2, 18, 14, 0, 0},
	{"TEM-200", "researcher2@demo.example", "MEMBRANE-QC", scheduling.KindIndependent, 1, 9, 2, 0, -20},
	{"TEM-200", "researcher@demo.example", "SSB-INTERFACE", scheduling.KindIndependent, 3, 14, 3, 15, 30},
	{"FIB-SEM", "researcher2@demo.example", "MEMBRANE-QC", scheduling.KindIndependent, 4, 9, 5, 0, 0},
}

// LoadBilling sets up, once, the demo's cost recovery: rates derived with the
// calculator from each instrument's costs (also entered as cost entries for the
// year), the default policy with a cap on unattended bookings, funding accounts and
// splits for every project, a month of used bookings last month with an issued
// statement per project, and a draft statement for the current month.
func LoadBilling(ctx context.Context, st Stores, bst BookingStores, fst BillingStores, now time.Time) error {
	have, err := fst.RateSchedules(ctx, "")
	if err != nil || len(have) > 0 {
		return err
	}
	users, projects, instruments, err := demoIDs(ctx, st)
	if err != nil {
		return err
	}
	manager := users["manager@demo.example"]
	loc, err := time.LoadLocation(Facility.TimeZone)
	if err != nil {
		return err
	}
	thisMonth, nextMonth := scheduling.PeriodBounds(scheduling.PeriodMonth, now, loc)
	prevMonth, _ := scheduling.PeriodBounds(scheduling.PeriodMonth, thisMonth.Add(-time.Hour), loc)
	if err := loadRates(ctx, fst, instruments, manager, prevMonth, now); err != nil {
		return err
	}
	p, err := fst.FacilityBillingPolicy(ctx)
	if err != nil {
		return err
	}
	p.UnattendedCapMinor = 60_000
	if err := fst.SetFacilityBillingPolicy(ctx, p, manager, now); err != nil {
		return err
	}
	for code, id := range projects {
		if err := loadFunding(ctx, fst, code, id, manager, prevMonth, now); err != nil {
			return err
		}
	}
	if err := loadLastMonth(ctx, bst, fst, users, projects, instruments, prevMonth, thisMonth, loc, now); err != nil {
		return err
	}
	for _, id := range projects {
		st, _, err := fst.ComputeStatement(ctx, id, prevMonth, thisMonth, manager, now)
		if err != nil {
			return fmt.Errorf("demo statement: %w", err)
		}
		if _, err := fst.IssueStatement(ctx, st.Record().ID, manager, now); err != nil {
			return err
		}
		if _, _, err := fst.ComputeStatement(ctx, id, thisMonth, nextMonth, manager, now); err != nil {
			return fmt.Errorf("demo draft statement: %w", err)
		}
	}
	return nil
}

// loadRates derives each instrument's rates from its costs, stores them from the
// start of last month and enters the costs for the year.
func loadRates(ctx context.Context, fst BillingStores, instruments map[string]string, manager string, from, now time.Time) error {
	for code, in := range demoCosts {
		calc, err := scheduling.CalculateRates(in)
		if err != nil {
			return fmt.Errorf("demo rates %s: %w", code, err)
		}
		s, err := calc.Schedule(in, scheduling.ScheduleOptions{InstrumentID: instruments[code], EffectiveFrom: from, Currency: Facility.Currency,
			StaffHourlyMinor: 6_500, UnattendedBasisPoints: 5000})
		if err != nil {
			return err
		}
		if _, err := fst.CreateRateSchedule(ctx, s, manager, now); err != nil {
			return err
		}
		year := from.Year()
		for _, e := range []scheduling.CostEntry{
			{Category: "service_contract", AmountMinor: in.ServiceContractMinor},
			{Category: "staff_salary_and_fringe", AmountMinor: calc.SalaryShareMinor + calc.FringeMinor},
			{Category: "supplies", AmountMinor: in.SuppliesMinor},
			{Category: "depreciation", AmountMinor: calc.DepreciationMinor},
		} {
			e.InstrumentID, e.FiscalYear, e.EnteredBy, e.EnteredAt = instruments[code], year, manager, now
			if _, err := fst.AddCostEntry(ctx, e); err != nil {
				return err
			}
		}
	}
	return nil
}

// loadFunding gives a project a grant and a departmental cost centre, split 70/30.
func loadFunding(ctx context.Context, fst BillingStores, code, projectID, manager string, from, now time.Time) error {
	until := from.AddDate(2, 0, 0)
	var shares []scheduling.FundingShare
	for i, a := range []scheduling.FundingAccount{
		{Code: "GR-" + code, ValidFrom: &from, ValidUntil: &until},
		{Code: "CC-" + code},
	} {
		a.ProjectID = projectID
		got, err := fst.SaveFundingAccount(ctx, a, manager, now)
		if err != nil {
			return err
		}
		shares = append(shares, scheduling.FundingShare{AccountID: got.ID, BasisPoints: []int64{7000, 3000}[i]})
	}
	return fst.SetProjectFunding(ctx, projectID, shares, manager, now)
}

// loadLastMonth books last month's sessions with their usage, skipping any that would
// overlap a booking the demo made already. Sessions end before the week ahead of the
// demo week (which holds last week's acquisition session), so the calendar around now
// shows the demo week as it was.
func loadLastMonth(ctx context.Context, bst BookingStores, fst BillingStores, users, projects, instruments map[string]string,
	from, to time.Time, loc *time.Location, now time.Time) error {
	staff := users["staff@demo.example"]
	monday, _ := scheduling.PeriodBounds(scheduling.PeriodWeek, now, loc)
	cutoff := monday.In(loc).AddDate(0, 0, -7)
	for day := from.In(loc); day.Before(to); day = day.AddDate(0, 0, 1) {
		wd := (int(day.Weekday()) + 6) % 7
		for _, s := range lastMonth {
			if s.weekday != wd {
				continue
			}
			start := time.Date(day.Year(), day.Month(), day.Day(), s.from, 0, 0, 0, loc)
			end := start.Add(time.Duration(s.hours) * time.Hour)
			if end.After(cutoff) {
				continue
			}
			nb := scheduling.NewBooking{InstrumentID: instruments[s.instrument], ProjectID: projects[s.project], UserID: users[s.user],
				Kind: s.kind, Start: start.UTC(), End: end.UTC(), Actor: staff}
			if s.kind.NeedsStaff() {
				nb.StaffID = staff
			}
			b, err := bst.CreateBooking(ctx, nb, now, func(scheduling.BookingContext) error { return nil })
			if errors.Is(err, beamledger.ErrConflict) {
				continue
			}
			if err != nil {
				return fmt.Errorf("demo booking last month: %w", err)
			}
			in := start.Add(time.Duration(s.usedLateMin) * time.Minute)
			out := end.Add(-time.Duration(s.usedLessMin) * time.Minute)
			if _, err := fst.CheckIn(ctx, b.ID, in, users[s.user], scheduling.SourceUser); err != nil {
				return err
			}
			if _, err := fst.CheckOut(ctx, b.ID, out, users[s.user]); err != nil {
				return err
			}
		}
	}
	return nil
}
