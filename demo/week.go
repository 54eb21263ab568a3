package demo

import (
	"context"
	"fmt"
	"time"

	"beamledger/accounts"
	"beamledger/scheduling"
)

// BookingStores is what loading the demo week needs beyond Stores.
type BookingStores interface {
	scheduling.QualificationStore
	scheduling.BookingStore
	scheduling.SeriesStore
	scheduling.WaitlistStore
}

type demoQualification struct {
	email, instrument string
	level             scheduling.QualificationLevel
	reason            string
}

var qualifications = []demoQualification{
	{"researcher@demo.example", "STEM-CORR", scheduling.LevelUnattended, "signed off after 40 h of supervised STEM work and the overnight-operation briefing"},
	{"researcher@demo.example", "TEM-200", scheduling.LevelIndependent, "completed the TEM operation course"},
	{"researcher2@demo.example", "STEM-CORR", scheduling.LevelSupervised, "induction and first training session done"},
	{"researcher2@demo.example", "TEM-200", scheduling.LevelIndependent, "completed the TEM operation course"},
	{"researcher2@demo.example", "FIB-SEM", scheduling.LevelIndependent, "completed FIB lift-out training"},
}

// demoBooking is one booking of the demo week: day 0 is the week's Monday.
type demoBooking struct {
	instrument, user, project string
	kind                      scheduling.BookingKind
	day, from, hours          int // start hour on that day, local time
	staff                     bool
	note                      string
}

var week = []demoBooking{
	{"STEM-CORR", "researcher@demo.example", "SSB-INTERFACE", scheduling.KindIndependent, 0, 9, 4, false, ""},
	{"STEM-CORR", "researcher2@demo.example", "CERIA-SAC", scheduling.KindAssisted, 0, 14, 3, true, ""},
	{"STEM-CORR", "researcher@demo.example", "SSB-INTERFACE", scheduling.KindUnattended, 0, 18, 14, false, "overnight 4D-STEM mapping"},
	{"STEM-CORR", "staff@demo.example", "", scheduling.KindService, 1, 8, 4, false, "corrector tuning and detector calibration"},
	{"STEM-CORR", "researcher2@demo.example", "MEMBRANE-QC", scheduling.KindTraining, 2, 9, 3, true, ""},
	{"STEM-CORR", "researcher2@demo.example", "CERIA-SAC", scheduling.KindAssisted, 3, 10, 6, true, ""},
	{"TEM-200", "researcher@demo.example", "SSB-INTERFACE", scheduling.KindIndependent, 1, 9, 3, false, ""},
	{"TEM-200", "researcher2@demo.example", "CERIA-SAC", scheduling.KindIndependent, 2, 13, 4, false, ""},
	{"TEM-200", "researcher2@demo.example", "MEMBRANE-QC", scheduling.KindIndependent, 4, 8, 5, false, ""},
	{"FIB-SEM", "staff@demo.example", "", scheduling.KindService, 3, 8, 9, false, "ion source bake-out"},
	{"FIB-SEM", "researcher2@demo.example", "MEMBRANE-QC", scheduling.KindIndependent, 4, 9, 6, false, ""},
}

// LoadWeek grants the demo qualifications and, when the instruments have no bookings
// in the week of now, books a realistic week: independent, assisted, training,
// unattended and service time across three instruments.
func LoadWeek(ctx context.Context, st Stores, bst BookingStores, now time.Time) (err error) {
	loc, err := time.LoadLocation(Facility.TimeZone)
	if err != nil {
		return err
	}
	users, projects, instruments, err := demoIDs(ctx, st)
	if err != nil {
		return err
	}
	staff := users["staff@demo.example"]
	have, err := bst.Qualifications(ctx, scheduling.QualificationFilter{})
	if err != nil {
		return err
	}
	held := map[[2]string]bool{}
	for _, q := range have {
		held[[2]string{q.UserID, q.InstrumentID}] = true
	}
	for _, q := range qualifications {
		if held[[2]string{users[q.email], instruments[q.instrument]}] {
			continue
		}
		if _, err := bst.GrantQualification(ctx, scheduling.NewQualification{UserID: users[q.email], InstrumentID: instruments[q.instrument],
			Level: q.level, Reason: q.reason, GrantedBy: staff}, now); err != nil {
			return fmt.Errorf("demo qualification: %w", err)
		}
	}
	monday, sunday := scheduling.PeriodBounds(scheduling.PeriodWeek, now, loc)
	existing, err := bst.Bookings(ctx, scheduling.BookingFilter{From: monday, To: sunday, IncludeCancelled: true})
	if err != nil || len(existing) > 0 {
		return err
	}
	if err := loadSeries(ctx, bst, loc, monday, users, projects, instruments, staff, now); err != nil {
		return err
	}
	defer func() {
		if err == nil {
			err = loadWaitlist(ctx, bst, loc, monday, users, projects, instruments, now)
		}
	}()
	for _, d := range week {
		day := monday.In(loc).AddDate(0, 0, d.day)
		start := time.Date(day.Year(), day.Month(), day.Day(), d.from, 0, 0, 0, loc)
		nb := scheduling.NewBooking{InstrumentID: instruments[d.instrument], ProjectID: projects[d.project], UserID: users[d.user],
			Kind: d.kind, Start: start.UTC(), End: start.Add(time.Duration(d.hours) * time.Hour).UTC(), Note: d.note, Actor: staff}
		if d.staff {
			nb.StaffID = staff
		}
		if _, err := bst.CreateBooking(ctx, nb, now, func(scheduling.BookingContext) error { return nil }); err != nil {
			return fmt.Errorf("demo booking %s %s day %d: %w", d.instrument, d.kind, d.day, err)
		}
	}
	return nil
}

func demoIDs(ctx context.Context, st Stores) (users, projects, instruments map[string]string, err error) {
	users, projects, instruments = map[string]string{}, map[string]string{}, map[string]string{}
	for _, p := range people {
		c, err := st.CredentialsByEmail(ctx, p.email)
		if err != nil {
			return nil, nil, nil, err
		}
		users[p.email] = c.User.ID
	}
	ps, err := st.Projects(ctx, accounts.ProjectFilter{})
	if err != nil {
		return nil, nil, nil, err
	}
	for _, p := range ps {
		projects[p.Code] = p.ID
	}
	ins, err := st.Instruments(ctx)
	if err != nil {
		return nil, nil, nil, err
	}
	for _, in := range ins {
		instruments[in.Code] = in.ID
	}
	return users, projects, instruments, nil
}

// loadSeries books the demo's recurring session: a weekly TEM slot on Friday
// afternoons for four weeks, starting in the demo week.
func loadSeries(ctx context.Context, bst BookingStores, loc *time.Location, monday time.Time,
	users, projects, instruments map[string]string, staff string, now time.Time) error {
	friday := monday.In(loc).AddDate(0, 0, 4)
	start := scheduling.Wall{Year: friday.Year(), Month: friday.Month(), Day: friday.Day(), Hour: 14}
	spec := scheduling.SeriesSpec{RRule: "FREQ=WEEKLY;COUNT=4;BYDAY=FR", Start: start, Duration: 3 * time.Hour}
	occs, err := scheduling.Expand(spec, loc, now.AddDate(0, 2, 0), 10)
	if err != nil {
		return err
	}
	tmpl := scheduling.NewBooking{InstrumentID: instruments["TEM-200"], ProjectID: projects["SSB-INTERFACE"],
		UserID: users["researcher@demo.example"], Kind: scheduling.KindIndependent, Note: "weekly cross-section survey", Actor: staff}
	_, err = bst.CreateSeries(ctx, scheduling.NewSeries{Template: tmpl, RRule: spec.RRule, Start: start, TimeZone: loc.String(),
		Duration: spec.Duration, Occurrences: occs, BookFree: true}, now,
		func(scheduling.Occurrence, scheduling.BookingContext) error { return nil })
	if err != nil {
		return fmt.Errorf("demo series: %w", err)
	}
	return nil
}

// loadWaitlist puts one request on the waitlist: the second researcher would like
// Tuesday morning on the TEM, which the first holds.
func loadWaitlist(ctx context.Context, bst BookingStores, loc *time.Location, monday time.Time,
	users, projects, instruments map[string]string, now time.Time) error {
	day := monday.In(loc).AddDate(0, 0, 1)
	start := time.Date(day.Year(), day.Month(), day.Day(), 10, 0, 0, 0, loc)
	_, err := bst.JoinWaitlist(ctx, scheduling.WaitlistEntry{InstrumentID: instruments["TEM-200"], ProjectID: projects["CERIA-SAC"],
		UserID: users["researcher2@demo.example"], Kind: scheduling.KindIndependent, Start: start.UTC(), End: start.Add(time.Hour).UTC()}, now)
	if err != nil {
		return fmt.Errorf("demo waitlist entry: %w", err)
	}
	return nil
}
