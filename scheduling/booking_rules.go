package scheduling

import (
	"fmt"
	"strings"
	"time"

	"beamledger"
)

// BookingCheck is everything the booking rules look at for one proposed booking.
type BookingCheck struct {
	Kind       BookingKind
	Start, End time.Time
	Now        time.Time      // when the booking is being made
	Loc        *time.Location // the facility's zone; nil reads as UTC
	Rules      Rules
	// Qualification is the booked user's on this instrument, nil if none.
	Qualification *Qualification
	// ByStaff is set when staff or a manager makes the booking: lead time and horizon do
	// not apply, and only they may book service time.
	ByStaff bool
	StaffID string // the assistant or trainer of an assisted or training booking
	// PrimeUsedMinutes are the project's prime-time minutes already booked on this
	// instrument in the ISO week (facility zone) of Start, excluding this booking.
	PrimeUsedMinutes int
}

// CheckBooking returns nil when the booking keeps every rule, else the first rule it
// breaks as a beamledger.RuleViolation (errors.Is ErrRule) whose Rule is one of, in the
// order checked: "range", "slot", "min_length", "max_length", "lead_time", "horizon",
// "opening_hours", "out_of_hours", "qualification", "staff_required",
// "service_by_staff", "prime_allowance". A kind that is not one of BookingKinds is
// malformed input and gives an ErrInvalid naming "kind" instead.
func CheckBooking(c BookingCheck) error {
	if errs := CheckAll(c); len(errs) > 0 {
		return errs[0]
	}
	return nil
}

// CheckAll returns every rule the booking breaks, in the order CheckBooking checks them,
// for a form that shows them all. An unknown kind or a range that ends before it starts
// is reported alone: the other rules mean nothing then.
func CheckAll(c BookingCheck) []error {
	if c.Loc == nil {
		c.Loc = time.UTC
	}
	if !c.Kind.Valid() {
		return []error{beamledger.InvalidField("kind", "must be one of independent, assisted, training, unattended, service")}
	}
	if !c.Start.Before(c.End) {
		return []error{beamledger.RuleViolation("range", "a booking must end after it starts", map[string]string{"end": "must be after start"})}
	}
	var errs []error
	for _, rule := range [...]func(BookingCheck) *beamledger.Error{
		BookingCheck.slot, BookingCheck.minLength, BookingCheck.maxLength,
		BookingCheck.leadTime, BookingCheck.horizon, BookingCheck.openingHours,
		BookingCheck.outOfHours, BookingCheck.qualification, BookingCheck.staffRequired,
		BookingCheck.serviceByStaff, BookingCheck.primeAllowance,
	} {
		if e := rule(c); e != nil {
			errs = append(errs, e)
		}
	}
	return errs
}

func (c BookingCheck) slot() *beamledger.Error {
	slot := max(c.Rules.SlotMinutes, 1)
	fields := map[string]string{}
	for _, f := range []struct {
		name string
		at   time.Time
	}{{"start", c.Start}, {"end", c.End}} {
		l := f.at.In(c.Loc)
		if l.Second() != 0 || l.Nanosecond() != 0 || (l.Hour()*60+l.Minute())%slot != 0 {
			fields[f.name] = fmt.Sprintf("must fall on a %d-minute boundary; %s is not one", slot, l.Format("15:04:05"))
		}
	}
	if len(fields) == 0 {
		return nil
	}
	return beamledger.RuleViolation("slot", fmt.Sprintf("bookings on this instrument start and end on %d-minute boundaries of local time (%s)", slot, c.Loc), fields)
}

func (c BookingCheck) length() time.Duration { return c.End.Sub(c.Start) }

func (c BookingCheck) minLength() *beamledger.Error {
	least := time.Duration(c.Rules.MinLengthMinutes) * time.Minute
	if c.length() >= least {
		return nil
	}
	return beamledger.RuleViolation("min_length", "bookings on this instrument last at least "+humanDuration(least),
		map[string]string{"end": "the booking lasts " + humanDuration(c.length())})
}

func (c BookingCheck) maxLength() *beamledger.Error {
	most := c.Rules.MaxLengthMinutes
	switch c.Kind {
	case KindService:
		return nil
	case KindUnattended:
		most = c.Rules.MaxUnattendedLengthMinutes
	}
	if c.length() <= time.Duration(most)*time.Minute {
		return nil
	}
	return beamledger.RuleViolation("max_length", fmt.Sprintf("%s bookings on this instrument last at most %s", c.Kind, humanDuration(time.Duration(most)*time.Minute)),
		map[string]string{"end": "the booking lasts " + humanDuration(c.length())})
}

func (c BookingCheck) leadTime() *beamledger.Error {
	earliest := c.Now.Add(time.Duration(c.Rules.LeadTimeMinutes) * time.Minute)
	if c.ByStaff || !c.Start.Before(earliest) {
		return nil
	}
	msg := "bookings cannot start in the past"
	if c.Rules.LeadTimeMinutes > 0 {
		msg = fmt.Sprintf("bookings on this instrument are made at least %s ahead: start at %s or later",
			humanDuration(time.Duration(c.Rules.LeadTimeMinutes)*time.Minute), c.localTime(earliest))
	}
	return beamledger.RuleViolation("lead_time", msg, map[string]string{"start": "is too soon"})
}

func (c BookingCheck) horizon() *beamledger.Error {
	// Calendar days in the facility's zone, so the limit keeps its clock time across DST.
	latest := c.Now.In(c.Loc).AddDate(0, 0, c.Rules.HorizonDays)
	if c.ByStaff || !c.Start.After(latest) {
		return nil
	}
	return beamledger.RuleViolation("horizon", fmt.Sprintf("bookings on this instrument open %d days ahead: start at %s or earlier",
		c.Rules.HorizonDays, c.localTime(latest)), map[string]string{"start": "is too far ahead"})
}

func (c BookingCheck) openingHours() *beamledger.Error {
	if c.Kind != KindIndependent && c.Kind != KindAssisted && c.Kind != KindTraining {
		return nil
	}
	if Inside(c.Rules.OpeningHours, c.Start, c.End, c.Loc) {
		return nil
	}
	return beamledger.RuleViolation("opening_hours",
		fmt.Sprintf("%s bookings lie inside opening hours; opening hours are %s", c.Kind, describeWindows(c.Rules.OpeningHours, c.Loc)),
		map[string]string{"start": "the booking must lie inside opening hours", "end": "the booking must lie inside opening hours"})
}

func (c BookingCheck) outOfHours() *beamledger.Error {
	if c.Kind != KindUnattended {
		return nil
	}
	inside := timeInside(c.Rules.OpeningHours, c.Start, c.End, c.Loc)
	if inside == 0 {
		return nil
	}
	return beamledger.RuleViolation("out_of_hours",
		fmt.Sprintf("unattended bookings lie entirely outside opening hours (%s); %s of this one falls inside",
			describeWindows(c.Rules.OpeningHours, c.Loc), humanDuration(inside)),
		map[string]string{"start": "the booking must lie outside opening hours", "end": "the booking must lie outside opening hours"})
}

// requiredLevel is the least qualification a kind of booking needs. Training needs
// none: it is how a user earns a first qualification, and a trainer is always present.
func requiredLevel(k BookingKind) (QualificationLevel, bool) {
	switch k {
	case KindAssisted:
		return LevelSupervised, true
	case KindIndependent:
		return LevelIndependent, true
	case KindUnattended:
		return LevelUnattended, true
	}
	return "", false // service needs none
}

func (c BookingCheck) qualification() *beamledger.Error {
	need, ok := requiredLevel(c.Kind)
	if !ok {
		return nil
	}
	q := c.Qualification
	var msg string
	switch {
	case q == nil || !q.Level.Valid():
		msg = "the booked user has no qualification on this instrument"
	case q.RevokedAt != nil && !c.Now.Before(*q.RevokedAt):
		msg = "the booked user's qualification on this instrument was revoked on " + c.localTime(*q.RevokedAt)
	case !q.ActiveAt(c.Now):
		msg = "the booked user's qualification on this instrument is not in force yet"
		if exp, ok := q.ExpiresAt(); ok && !c.Now.Before(exp) {
			msg = fmt.Sprintf("the booked user's qualification on this instrument expired on %s after %d days without use; staff can renew it",
				c.localTime(exp), *q.ExpiresAfterIdleDays)
		}
	case !q.Level.AtLeast(need):
		msg = fmt.Sprintf("%s bookings need qualification level %s or higher; the booked user's is %s", c.Kind, need, q.Level)
	default:
		return nil
	}
	return beamledger.RuleViolation("qualification", msg, map[string]string{"kind": fmt.Sprintf("needs qualification level %s or higher", need)})
}

func (c BookingCheck) staffRequired() *beamledger.Error {
	if !c.Kind.NeedsStaff() || strings.TrimSpace(c.StaffID) != "" {
		return nil
	}
	role := map[BookingKind]string{KindAssisted: "assists", KindTraining: "trains"}[c.Kind]
	return beamledger.RuleViolation("staff_required", fmt.Sprintf("%s bookings name the staff member who %s", c.Kind, role),
		map[string]string{"staff_id": "is required for " + string(c.Kind) + " bookings"})
}

func (c BookingCheck) serviceByStaff() *beamledger.Error {
	if c.Kind != KindService || c.ByStaff {
		return nil
	}
	return beamledger.RuleViolation("service_by_staff", "service time is booked by facility staff",
		map[string]string{"kind": "service is for staff only"})
}

func (c BookingCheck) primeAllowance() *beamledger.Error {
	allowance := c.Rules.PrimeAllowanceMinutesPerWeek
	if allowance <= 0 || c.Kind == KindService {
		return nil
	}
	// PrimeUsedMinutes covers the week of Start only, so only this booking's minutes in
	// that week are weighed against it.
	weekStart, weekEnd := PeriodBounds(PeriodWeek, c.Start, c.Loc)
	end := c.End
	if weekEnd.Before(end) {
		end = weekEnd
	}
	mine := MinutesInside(c.Rules.PrimeTime, c.Start, end, c.Loc)
	if mine == 0 || mine+c.PrimeUsedMinutes <= allowance {
		return nil
	}
	minutes := func(n int) string { return humanDuration(time.Duration(n) * time.Minute) }
	return beamledger.RuleViolation("prime_allowance",
		fmt.Sprintf("prime time (%s) is limited to %s per project per week on this instrument; the project has %s in the week of %s and this booking adds %s",
			describeWindows(c.Rules.PrimeTime, c.Loc), minutes(allowance), minutes(c.PrimeUsedMinutes),
			weekStart.In(c.Loc).Format("Mon 2006-01-02"), minutes(mine)),
		map[string]string{"start": "the booking takes more prime time than the project has left", "end": "the booking takes more prime time than the project has left"})
}

// localTime shows an instant as facility wall time with the zone's name.
func (c BookingCheck) localTime(t time.Time) string {
	return t.In(c.Loc).Format("Mon 2006-01-02 15:04") + " " + c.Loc.String()
}

// humanDuration writes a duration as people say it: "30 min", "12 h", "1 h 30 min".
func humanDuration(d time.Duration) string {
	m := int(d / time.Minute)
	switch {
	case m < 60:
		return fmt.Sprintf("%d min", m)
	case m%60 == 0:
		return fmt.Sprintf("%d h", m/60)
	}
	return fmt.Sprintf("%d h %d min", m/60, m%60)
}
