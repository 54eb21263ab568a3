package server

import (
	"context"
	"errors"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

// Cost recovery: rate schedules, the billing policy, funding accounts and splits, the
// rate calculator and cost entries. Statements and reports are in
// handlers_billing_statements.go.

func (s *Server) handleRateScheduleList(c echo.Context) error {
	ctx := c.Request().Context()
	if _, err := s.store.Instrument(ctx, c.Param("instrument_id")); err != nil {
		return err
	}
	out, err := s.store.RateSchedules(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(out))
}

// rateScheduleInput is a new schedule; the currency is always the facility's.
type rateScheduleInput struct {
	EffectiveFrom time.Time               `json:"effective_from"`
	Classes       []scheduling.ClassRates `json:"classes"`
}

// newSchedule checks a schedule to be stored: the facility's currency, and an
// effective instant no earlier than now, so that no charge already incurred changes.
func (s *Server) newSchedule(c echo.Context, sched scheduling.RateSchedule) (scheduling.RateSchedule, error) {
	ctx := c.Request().Context()
	f, err := s.store.Facility(ctx)
	if err != nil {
		return sched, err
	}
	sched.Currency = f.Currency
	if err := sched.Validate(); err != nil {
		return sched, err
	}
	if sched.EffectiveFrom.Before(s.now()) {
		return sched, beamledger.InvalidField("effective_from", "must not lie in the past: a rate change applies from now on, and past charges never change")
	}
	return s.store.CreateRateSchedule(ctx, sched, principal(ctx).UserID, s.now())
}

func (s *Server) handleRateScheduleCreate(c echo.Context) error {
	var in rateScheduleInput
	if err := bind(c, &in); err != nil {
		return err
	}
	out, err := s.newSchedule(c, scheduling.RateSchedule{InstrumentID: c.Param("instrument_id"), EffectiveFrom: in.EffectiveFrom, Classes: in.Classes})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, out)
}

// policyAnswer shows a billing policy: what is stored at this level and the policy in force.
type policyAnswer struct {
	Override  any                      `json:"override"`
	Effective scheduling.BillingPolicy `json:"effective"`
}

func (s *Server) handleFacilityBillingGet(c echo.Context) error {
	p, err := s.store.FacilityBillingPolicy(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, policyAnswer{Override: p, Effective: p})
}

// handleFacilityBillingSet replaces the facility's policy: fields left out keep the
// project's default. The policy in force on every instrument must stay valid.
func (s *Server) handleFacilityBillingSet(c echo.Context) error {
	p := scheduling.DefaultBillingPolicy()
	if err := bind(c, &p); err != nil {
		return err
	}
	return s.setPolicy(c, p, p, func(ctx context.Context) error {
		ins, err := s.store.Instruments(ctx)
		if err != nil {
			return err
		}
		for _, in := range ins {
			o, err := s.store.InstrumentBillingOverride(ctx, in.ID)
			if err != nil {
				return err
			}
			if err := p.With(o).Validate(); err != nil {
				return beamledger.Invalid("with this policy "+in.Code+"'s own billing policy would be invalid: "+err.Error(), nil)
			}
		}
		return s.store.SetFacilityBillingPolicy(ctx, p, principal(ctx).UserID, s.now())
	})
}

func (s *Server) handleInstrumentBillingGet(c echo.Context) error {
	ctx := c.Request().Context()
	o, err := s.store.InstrumentBillingOverride(ctx, c.Param("instrument_id"))
	if err != nil {
		return err
	}
	p, err := s.store.FacilityBillingPolicy(ctx)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, policyAnswer{Override: o, Effective: p.With(o)})
}

func (s *Server) handleInstrumentBillingSet(c echo.Context) error {
	var o scheduling.BillingPolicyOverride
	if err := bind(c, &o); err != nil {
		return err
	}
	p, err := s.store.FacilityBillingPolicy(c.Request().Context())
	if err != nil {
		return err
	}
	return s.setPolicy(c, o, p.With(o), func(ctx context.Context) error {
		return s.store.SetInstrumentBillingOverride(ctx, c.Param("instrument_id"), o, principal(ctx).UserID, s.now())
	})
}

// setPolicy is the common end of changing a policy at either level: the policy that
// would be in force must be valid, then save stores the override and the answer shows
// both.
func (s *Server) setPolicy(c echo.Context, override any, effective scheduling.BillingPolicy, save func(context.Context) error) error {
	if err := effective.Validate(); err != nil {
		return err
	}
	if err := save(c.Request().Context()); err != nil {
		return err
	}
	return c.JSON(http.StatusOK, policyAnswer{Override: override, Effective: effective})
}

func (s *Server) handleFundingAccountList(c echo.Context) error {
	ctx, p, err := s.paramProject(c)
	if err != nil {
		return err
	}
	out, err := s.store.FundingAccounts(ctx, p.ID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(out))
}

// fundingAccountInput creates an account or, in a PATCH, changes the fields sent.
type fundingAccountInput struct {
	Code       *string    `json:"code"`
	ValidFrom  *time.Time `json:"valid_from"`
	ValidUntil *time.Time `json:"valid_until"`
	CapMinor   *int64     `json:"cap_minor"`
	// RateClass prices the account's shares at its own class; "" returns it to the
	// project's.
	RateClass *accounts.RateClass `json:"rate_class"`
}

func (in fundingAccountInput) apply(a scheduling.FundingAccount) scheduling.FundingAccount {
	if in.Code != nil {
		a.Code = *in.Code
	}
	if in.ValidFrom != nil {
		a.ValidFrom = in.ValidFrom
	}
	if in.ValidUntil != nil {
		a.ValidUntil = in.ValidUntil
	}
	if in.CapMinor != nil {
		a.CapMinor = *in.CapMinor
	}
	if in.RateClass != nil {
		a.RateClass = *in.RateClass
	}
	return a
}

func (s *Server) handleFundingAccountCreate(c echo.Context) error {
	var in fundingAccountInput
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx, p, err := s.paramProject(c)
	if err != nil {
		return err
	}
	a := in.apply(scheduling.FundingAccount{ProjectID: p.ID})
	if err := a.Validate(); err != nil {
		return err
	}
	out, err := s.store.SaveFundingAccount(ctx, a, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, out)
}

func (s *Server) handleFundingAccountPatch(c echo.Context) error {
	var in fundingAccountInput
	if err := bind(c, &in); err != nil {
		return err
	}
	if in == (fundingAccountInput{}) {
		return beamledger.Invalid("nothing to change: send at least one of code, valid_from, valid_until, cap_minor, rate_class", nil)
	}
	ctx := c.Request().Context()
	cur, err := s.store.FundingAccount(ctx, c.Param("account_id"))
	if err != nil {
		return err
	}
	a := in.apply(cur)
	if err := a.Validate(); err != nil {
		return err
	}
	out, err := s.store.SaveFundingAccount(ctx, a, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}

// fundingInput is a funding split: shares in basis points summing to 10000.
type fundingInput struct {
	Funding []scheduling.FundingShare `json:"funding"`
}

func (s *Server) handleProjectFundingGet(c echo.Context) error {
	ctx, p, err := s.paramProject(c)
	if err != nil {
		return err
	}
	return answerSplit(c, p.ID, func(id string) ([]scheduling.FundingShare, error) { return s.store.ProjectFunding(ctx, id) })
}

func (s *Server) handleProjectFundingSet(c echo.Context) error {
	in, err := bindSplit(c)
	if err != nil {
		return err
	}
	ctx, p, err := s.paramProject(c)
	if err != nil {
		return err
	}
	if err := s.store.SetProjectFunding(ctx, p.ID, in.Funding, principal(ctx).UserID, s.now()); err != nil {
		return err
	}
	return c.JSON(http.StatusOK, in)
}

func (s *Server) handleBookingFundingGet(c echo.Context) error {
	ctx := c.Request().Context()
	b, err := s.visibleBooking(ctx, c.Param("booking_id"))
	if err != nil {
		return err
	}
	return answerSplit(c, b.ID, func(id string) ([]scheduling.FundingShare, error) { return s.store.BookingFunding(ctx, id) })
}

func (s *Server) handleBookingFundingSet(c echo.Context) error {
	in, err := bindSplit(c)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	b, err := s.visibleBooking(ctx, c.Param("booking_id"))
	if err != nil {
		return err
	}
	if b.Kind == scheduling.KindService {
		return beamledger.InvalidField("booking_id", "service time is never charged, so it has no funding")
	}
	if err := s.store.SetBookingFunding(ctx, b, in.Funding, principal(ctx).UserID, s.now()); err != nil {
		return err
	}
	return c.JSON(http.StatusOK, in)
}

// bindSplit reads a funding split from the body and checks its shares.
func bindSplit(c echo.Context) (fundingInput, error) {
	var in fundingInput
	if err := bind(c, &in); err != nil {
		return in, err
	}
	return in, scheduling.ValidateShares(in.Funding)
}

// answerSplit answers the split that read gives for an owner (a project or booking).
func answerSplit(c echo.Context, ownerID string, read func(string) ([]scheduling.FundingShare, error)) error {
	out, err := read(ownerID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, fundingInput{Funding: out})
}

// paramProject loads the project the path names, if the caller may read it, with the
// request's context: the preamble of every handler under /projects/{project_id}.
func (s *Server) paramProject(c echo.Context) (context.Context, accounts.Project, error) {
	ctx := c.Request().Context()
	p, err := s.visibleProject(ctx, c.Param("project_id"))
	return ctx, p, err
}

// rateCalculationInput is the calculator's inputs and, optionally, where to save the
// result as a new rate schedule.
type rateCalculationInput struct {
	scheduling.RateInputs
	Save *struct {
		InstrumentID          string    `json:"instrument_id"`
		EffectiveFrom         time.Time `json:"effective_from"`
		StaffHourlyMinor      int64     `json:"staff_hourly_minor"`
		UnattendedBasisPoints int64     `json:"unattended_basis_points"`
	} `json:"save"`
}

type rateCalculationAnswer struct {
	Calculation scheduling.RateCalculation `json:"calculation"`
	Schedule    *scheduling.RateSchedule   `json:"schedule,omitempty"`
}

// handleRateCalculation derives hourly rates from a year's costs; with "save" it
// stores them as the instrument's schedule from the instant given (201).
func (s *Server) handleRateCalculation(c echo.Context) error {
	var in rateCalculationInput
	if err := bind(c, &in); err != nil {
		return err
	}
	calc, err := scheduling.CalculateRates(in.RateInputs)
	if err != nil {
		return err
	}
	if in.Save == nil {
		return c.JSON(http.StatusOK, rateCalculationAnswer{Calculation: calc})
	}
	f, err := s.store.Facility(c.Request().Context())
	if err != nil {
		return err
	}
	sched, err := calc.Schedule(in.RateInputs, scheduling.ScheduleOptions{InstrumentID: in.Save.InstrumentID, EffectiveFrom: in.Save.EffectiveFrom,
		Currency: f.Currency, StaffHourlyMinor: in.Save.StaffHourlyMinor, UnattendedBasisPoints: in.Save.UnattendedBasisPoints})
	if err != nil {
		return prefixFields(err, "save.")
	}
	if sched, err = s.newSchedule(c, sched); err != nil {
		return prefixFields(err, "save.")
	}
	return c.JSON(http.StatusCreated, rateCalculationAnswer{Calculation: calc, Schedule: &sched})
}

// prefixFields names fields of a nested object by their path ("save.effective_from").
func prefixFields(err error, prefix string) error {
	var e *beamledger.Error
	if !errors.As(err, &e) || len(e.Fields) == 0 {
		return err
	}
	fields := map[string]string{}
	for k, v := range e.Fields {
		if len(k) < len(prefix) || k[:len(prefix)] != prefix {
			k = prefix + k
		}
		fields[k] = v
	}
	out := *e
	out.Fields = fields
	return &out
}

func (s *Server) handleCostEntryCreate(c echo.Context) error {
	var e scheduling.CostEntry
	if err := bind(c, &e); err != nil {
		return err
	}
	ctx := c.Request().Context()
	e.EnteredBy, e.EnteredAt = principal(ctx).UserID, s.now()
	if err := e.Validate(); err != nil {
		return err
	}
	out, err := s.store.AddCostEntry(ctx, e)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, out)
}
