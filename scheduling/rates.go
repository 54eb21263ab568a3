package scheduling

import (
	"cmp"
	"fmt"
	"slices"
	"strings"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// RateSchedule is one instrument's hourly rates from an instant on: in force from
// EffectiveFrom until the next schedule of the same instrument takes over. A rate
// change is a new schedule, never an edit, so charges already computed keep the rates
// they were computed at.
type RateSchedule struct {
	ID            string    `json:"id"`
	InstrumentID  string    `json:"instrument_id"`
	EffectiveFrom time.Time `json:"effective_from"`
	// Currency is the ISO 4217 code every amount of the schedule is in: the facility's.
	Currency string       `json:"currency"`
	Classes  []ClassRates `json:"classes"`
}

// ClassRates are the hourly rates, in minor units, that projects of one rate class pay.
// The staff rate is per class too: external users pay F&A on all of their time, staff
// time included (REFERENCE §3 [practice]), so one staff rate for every class would
// undercharge them or overcharge internal users.
type ClassRates struct {
	RateClass              accounts.RateClass `json:"rate_class"`
	IndependentHourlyMinor int64              `json:"independent_hourly_minor"`
	AssistedHourlyMinor    int64              `json:"assisted_hourly_minor"`
	TrainingHourlyMinor    int64              `json:"training_hourly_minor"`
	UnattendedHourlyMinor  int64              `json:"unattended_hourly_minor"`
	// StaffHourlyMinor is added for the staff member's time on the booking kinds the
	// billing policy names (assisted and training by default).
	StaffHourlyMinor int64 `json:"staff_hourly_minor"`
}

// InstrumentHourlyMinor is the instrument rate for a booking kind; ok is false for
// service time, which is never charged.
func (c ClassRates) InstrumentHourlyMinor(k BookingKind) (rate int64, ok bool) {
	switch k {
	case KindIndependent:
		return c.IndependentHourlyMinor, true
	case KindAssisted:
		return c.AssistedHourlyMinor, true
	case KindTraining:
		return c.TrainingHourlyMinor, true
	case KindUnattended:
		return c.UnattendedHourlyMinor, true
	}
	return 0, false
}

// Rates returns the rates of a class, and whether the schedule has them.
func (s RateSchedule) Rates(c accounts.RateClass) (ClassRates, bool) {
	i := slices.IndexFunc(s.Classes, func(r ClassRates) bool { return r.RateClass == c })
	if i < 0 {
		return ClassRates{}, false
	}
	return s.Classes[i], true
}

// Validate checks a schedule, naming offending fields by their JSON names
// ("classes[1].staff_hourly_minor").
func (s RateSchedule) Validate() error {
	fe := beamledger.FieldErrors{}
	if strings.TrimSpace(s.InstrumentID) == "" {
		fe.Add("instrument_id", "is required")
	}
	if s.EffectiveFrom.IsZero() {
		fe.Add("effective_from", "is required")
	}
	if !currencyCode.MatchString(s.Currency) {
		fe.Add("currency", "must be an ISO 4217 code such as EUR")
	}
	if len(s.Classes) == 0 {
		fe.Add("classes", "at least one rate class is required")
	}
	seen := map[accounts.RateClass]bool{}
	for i, c := range s.Classes {
		at := fmt.Sprintf("classes[%d].", i)
		if !c.RateClass.Valid() {
			fe.Add(at+"rate_class", "must be one of internal, external_academic, commercial")
		} else if seen[c.RateClass] {
			fe.Add(at+"rate_class", "appears twice; a schedule has one set of rates per class")
		}
		seen[c.RateClass] = true
		for _, r := range []struct {
			field string
			v     int64
		}{
			{"independent_hourly_minor", c.IndependentHourlyMinor},
			{"assisted_hourly_minor", c.AssistedHourlyMinor},
			{"training_hourly_minor", c.TrainingHourlyMinor},
			{"unattended_hourly_minor", c.UnattendedHourlyMinor},
			{"staff_hourly_minor", c.StaffHourlyMinor},
		} {
			if r.v < 0 || r.v > maxHourlyRateMinor {
				fe.Add(at+r.field, fmt.Sprintf("must be between 0 and %d minor units an hour", int64(maxHourlyRateMinor)))
			}
		}
	}
	return fe.Err()
}

// SchedulePiece is the part of a range that one rate schedule prices.
type SchedulePiece struct {
	Interval
	Schedule RateSchedule `json:"schedule"`
}

// SchedulePieces splits [start, end) at every rate change of the instrument and returns
// each piece with the schedule in force over it, in time order; the pieces cover the
// range exactly. Schedules of other instruments are ignored. It returns a RuleViolation
// "rate_schedule_in_force" when part of the range precedes the instrument's first
// schedule, and ErrInvalid when two of its schedules take effect at the same instant
// (which one would be in force is then a guess). An empty range has no pieces.
func SchedulePieces(schedules []RateSchedule, instrumentID string, start, end time.Time) ([]SchedulePiece, error) {
	return appendSchedulePieces(nil, schedules, instrumentID, start, end)
}

// appendSchedulePieces is SchedulePieces appending to dst, so that pricing a booking
// (nearly always one piece) can keep its pieces on the stack.
func appendSchedulePieces(dst []SchedulePiece, schedules []RateSchedule, instrumentID string, start, end time.Time) ([]SchedulePiece, error) {
	own := schedules // as a statement passes them: the instrument's own, in order
	for i, s := range schedules {
		if s.InstrumentID != instrumentID || i > 0 && !schedules[i-1].EffectiveFrom.Before(s.EffectiveFrom) {
			own = nil
			for _, s := range schedules {
				if s.InstrumentID == instrumentID {
					own = append(own, s)
				}
			}
			slices.SortStableFunc(own, func(a, b RateSchedule) int { return a.EffectiveFrom.Compare(b.EffectiveFrom) })
			break
		}
	}
	for i := 1; i < len(own); i++ {
		if own[i].EffectiveFrom.Equal(own[i-1].EffectiveFrom) {
			return nil, beamledger.Invalid(fmt.Sprintf("rate schedules %q and %q of instrument %s take effect at the same instant",
				own[i-1].ID, own[i].ID, instrumentID), map[string]string{"effective_from": "two schedules of one instrument take effect at the same instant"})
		}
	}
	if !start.Before(end) {
		return nil, nil
	}
	if len(own) == 0 || start.Before(own[0].EffectiveFrom) {
		at := start.UTC().Format(time.RFC3339)
		return nil, beamledger.RuleViolation("rate_schedule_in_force",
			fmt.Sprintf("no rate schedule of instrument %s is in force at %s", instrumentID, at),
			map[string]string{"rate_schedules": "instrument " + instrumentID + " needs a schedule effective at or before " + at})
	}
	pieces := dst
	for i, s := range own {
		until := end // the last schedule stays in force
		if i+1 < len(own) {
			until = own[i+1].EffectiveFrom
		}
		if iv, ok := (Interval{Start: s.EffectiveFrom, End: until}).Clip(start, end); ok {
			pieces = append(pieces, SchedulePiece{Interval: iv, Schedule: s})
		}
	}
	return pieces, nil
}

// compareInterval orders intervals by start, then end.
func compareInterval(a, b Interval) int {
	return cmp.Or(a.Start.Compare(b.Start), a.End.Compare(b.End))
}
