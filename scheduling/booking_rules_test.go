package scheduling

import (
	"errors"
	"slices"
	"strings"
	"testing"
	"time"

	"beamledger"
)

// ruleOf returns the rule a CheckBooking error names, "" for nil, or stops the test when
// the error is not a rule violation.
func ruleOf(t *testing.T, err error) string {
	t.Helper()
	if err == nil {
		return ""
	}
	var be *beamledger.Error
	if !errors.As(err, &be) || !errors.Is(err, beamledger.ErrRule) {
		t.Fatalf("error %v is not a rule violation", err)
	}
	return be.Rule
}

// activeQualification is held since 2024-01-01 and never expires.
func activeQualification(level QualificationLevel) *Qualification {
	return &Qualification{UserID: "u1", InstrumentID: "i1", Level: level, GrantedAt: time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC)}
}

// berlinCheck is an independent booking that keeps every default rule: Monday
// 2024-03-04 10:00–12:00 Berlin, made the Friday before by a user qualified for
// unattended work. Cases change one thing.
func berlinCheck(t *testing.T) BookingCheck {
	berlin := ruleZone(t, "Europe/Berlin")
	return BookingCheck{
		Kind:          KindIndependent,
		Start:         ruleWall(t, berlin, "2024-03-04 10:00"),
		End:           ruleWall(t, berlin, "2024-03-04 12:00"),
		Now:           ruleWall(t, berlin, "2024-03-01 09:00"),
		Loc:           berlin,
		Rules:         DefaultRules(),
		Qualification: activeQualification(LevelUnattended),
	}
}

func TestCheckBooking(t *testing.T) {
	berlin, kolkata := ruleZone(t, "Europe/Berlin"), ruleZone(t, "Asia/Kolkata")
	at := func(s string) time.Time { return ruleWall(t, berlin, s) }
	everyDay := func(start, end string) []ClockWindow { return []ClockWindow{{Start: start, End: end}} }
	// All examples are [constructed] against DefaultRules ([practice]) unless noted.
	tests := []struct {
		name   string
		change func(c *BookingCheck)
		rule   string // "" when the booking is allowed
		field  string // a field the violation must name
		msg    string // text the message must contain
	}{
		{"baseline", func(*BookingCheck) {}, "", "", ""},

		{"end equals start", func(c *BookingCheck) { c.End = c.Start }, "range", "end", ""},
		{"end before start", func(c *BookingCheck) { c.Start, c.End = c.End, c.Start }, "range", "end", ""},

		// Slots are counted in local clock time. Kolkata is UTC+05:30, so local 09:00 is
		// 03:30 UTC: a UTC grid of hours would refuse it and accept local 09:30.
		{"Kolkata 15-minute slots on the grid", func(c *BookingCheck) {
			c.Loc, c.Start, c.End, c.Now = kolkata, ruleWall(t, kolkata, "2024-03-04 09:00"), ruleWall(t, kolkata, "2024-03-04 10:30"), ruleWall(t, kolkata, "2024-03-01 09:00")
		}, "", "", ""},
		{"Kolkata 15-minute slots off the grid", func(c *BookingCheck) {
			c.Loc, c.Start, c.End, c.Now = kolkata, ruleWall(t, kolkata, "2024-03-04 09:07"), ruleWall(t, kolkata, "2024-03-04 10:30"), ruleWall(t, kolkata, "2024-03-01 09:00")
		}, "slot", "start", "15-minute boundaries of local time (Asia/Kolkata)"},
		{"Kolkata 60-minute slots at local 09:00", func(c *BookingCheck) {
			c.Rules.SlotMinutes = 60
			c.Loc, c.Start, c.End, c.Now = kolkata, ruleWall(t, kolkata, "2024-03-04 09:00"), ruleWall(t, kolkata, "2024-03-04 11:00"), ruleWall(t, kolkata, "2024-03-01 09:00")
		}, "", "", ""},
		{"Kolkata 60-minute slots at local 09:30 (a whole UTC hour)", func(c *BookingCheck) {
			c.Rules.SlotMinutes = 60
			c.Loc, c.Start, c.End, c.Now = kolkata, ruleWall(t, kolkata, "2024-03-04 09:30"), ruleWall(t, kolkata, "2024-03-04 11:30"), ruleWall(t, kolkata, "2024-03-01 09:00")
		}, "slot", "start", "60-minute"},
		{"end off the grid", func(c *BookingCheck) { c.End = at("2024-03-04 11:10") }, "slot", "end", ""},
		{"stray seconds", func(c *BookingCheck) { c.Start = c.Start.Add(30 * time.Second) }, "slot", "start", ""},

		{"30 minutes is the minimum", func(c *BookingCheck) { c.End = at("2024-03-04 10:30") }, "", "", ""},
		{"15 minutes is too short", func(c *BookingCheck) { c.End = at("2024-03-04 10:15") }, "min_length", "end", "at least 30 min"},
		{"12 h is the maximum", func(c *BookingCheck) {
			c.Rules.OpeningHours = everyDay("00:00", "24:00")
			c.Start, c.End = at("2024-03-04 06:00"), at("2024-03-04 18:00")
		}, "", "", ""},
		{"12 h 15 min is too long", func(c *BookingCheck) {
			c.Rules.OpeningHours = everyDay("00:00", "24:00")
			c.Start, c.End = at("2024-03-04 06:00"), at("2024-03-04 18:15")
		}, "max_length", "end", "at most 12 h"},
		{"unattended 16 h is the maximum", func(c *BookingCheck) {
			c.Kind, c.Start, c.End = KindUnattended, at("2024-03-08 18:00"), at("2024-03-09 10:00")
		}, "", "", ""},
		{"unattended 16 h 15 min is too long", func(c *BookingCheck) {
			c.Kind, c.Start, c.End = KindUnattended, at("2024-03-08 18:00"), at("2024-03-09 10:15")
		}, "max_length", "end", "at most 16 h"},
		// [computed] Saturday 18:00 CEST to Sunday 09:00 CET is 15 h on the clock, 16 h elapsed.
		{"unattended across the autumn change, 16 h elapsed", func(c *BookingCheck) {
			c.Kind, c.Now = KindUnattended, at("2024-10-20 09:00")
			c.Start, c.End = ruleTime(t, "2024-10-26T18:00:00+02:00"), ruleTime(t, "2024-10-27T09:00:00+01:00")
		}, "", "", ""},
		{"unattended across the autumn change, 16 h 15 min elapsed", func(c *BookingCheck) {
			c.Kind, c.Now = KindUnattended, at("2024-10-20 09:00")
			c.Start, c.End = ruleTime(t, "2024-10-26T18:00:00+02:00"), ruleTime(t, "2024-10-27T09:15:00+01:00")
		}, "max_length", "end", ""},
		{"service has no maximum", func(c *BookingCheck) {
			c.Kind, c.ByStaff, c.Start, c.End = KindService, true, at("2024-03-04 00:00"), at("2024-03-06 00:00")
		}, "", "", ""},

		{"lead time met", func(c *BookingCheck) {
			c.Rules.LeadTimeMinutes, c.Now = 120, at("2024-03-04 08:00")
		}, "", "", ""},
		{"lead time missed by 15 min", func(c *BookingCheck) {
			c.Rules.LeadTimeMinutes, c.Now = 120, at("2024-03-04 08:15")
		}, "lead_time", "start", "at least 2 h ahead: start at Mon 2024-03-04 10:15 Europe/Berlin"},
		{"staff skip lead time", func(c *BookingCheck) {
			c.Rules.LeadTimeMinutes, c.Now, c.ByStaff = 120, at("2024-03-04 08:15"), true
		}, "", "", ""},
		{"starting now is not the past", func(c *BookingCheck) { c.Now = c.Start }, "", "", ""},
		{"starting in the past", func(c *BookingCheck) { c.Now = at("2024-03-04 10:01") }, "lead_time", "start", "past"},
		// [computed] 90 calendar days after Friday 2024-03-01 09:00 CET is Thursday 2024-05-30 09:00
		// CEST; 90×24 h would be 10:00 CEST and let the 09:15 start through.
		{"horizon's last start", func(c *BookingCheck) {
			c.Start, c.End = at("2024-05-30 09:00"), at("2024-05-30 11:00")
		}, "", "", ""},
		{"beyond the horizon", func(c *BookingCheck) {
			c.Start, c.End = at("2024-05-30 09:15"), at("2024-05-30 11:15")
		}, "horizon", "start", "90 days ahead: start at Thu 2024-05-30 09:00 Europe/Berlin or earlier"},
		{"staff skip the horizon", func(c *BookingCheck) {
			c.Start, c.End, c.ByStaff = at("2024-05-30 09:15"), at("2024-05-30 11:15"), true
		}, "", "", ""},

		{"whole opening day", func(c *BookingCheck) { c.Start, c.End = at("2024-03-04 08:00"), at("2024-03-04 18:00") }, "", "", ""},
		{"before opening", func(c *BookingCheck) {
			c.Start, c.End = at("2024-03-04 07:45"), at("2024-03-04 09:00")
		}, "opening_hours", "start", "opening hours are Mon–Fri 08:00–18:00 Europe/Berlin"},
		{"past closing", func(c *BookingCheck) { c.Start, c.End = at("2024-03-04 17:00"), at("2024-03-04 18:15") }, "opening_hours", "end", ""},
		{"Saturday", func(c *BookingCheck) { c.Start, c.End = at("2024-03-09 10:00"), at("2024-03-09 12:00") }, "opening_hours", "", ""},
		{"assisted on Saturday", func(c *BookingCheck) {
			c.Kind, c.StaffID, c.Start, c.End = KindAssisted, "s1", at("2024-03-09 10:00"), at("2024-03-09 12:00")
		}, "opening_hours", "", ""},
		{"training on Saturday", func(c *BookingCheck) {
			c.Kind, c.StaffID, c.Start, c.End = KindTraining, "s1", at("2024-03-09 10:00"), at("2024-03-09 12:00")
		}, "opening_hours", "", ""},
		{"service on Saturday", func(c *BookingCheck) {
			c.Kind, c.ByStaff, c.Start, c.End = KindService, true, at("2024-03-09 10:00"), at("2024-03-09 12:00")
		}, "", "", ""},
		// 2024-10-27, the autumn change in Berlin, is a Sunday.
		{"on the autumn change day, closed on Sundays", func(c *BookingCheck) {
			c.Now = at("2024-10-20 09:00")
			c.Start, c.End = ruleTime(t, "2024-10-27T10:00:00+01:00"), ruleTime(t, "2024-10-27T12:00:00+01:00")
		}, "opening_hours", "", ""},
		{"on the autumn change day, open every day 08:00–18:00", func(c *BookingCheck) {
			c.Now, c.Rules.OpeningHours = at("2024-10-20 09:00"), everyDay("08:00", "18:00")
			c.Start, c.End = ruleTime(t, "2024-10-27T08:00:00+01:00"), ruleTime(t, "2024-10-27T18:00:00+01:00")
		}, "", "", ""},
		{"on the autumn change day, an hour early", func(c *BookingCheck) {
			c.Now, c.Rules.OpeningHours = at("2024-10-20 09:00"), everyDay("08:00", "18:00")
			c.Start, c.End = ruleTime(t, "2024-10-27T07:00:00+01:00"), ruleTime(t, "2024-10-27T09:00:00+01:00")
		}, "opening_hours", "", ""},
		{"the Monday after the autumn change", func(c *BookingCheck) {
			c.Now = at("2024-10-20 09:00")
			c.Start, c.End = ruleTime(t, "2024-10-28T08:00:00+01:00"), ruleTime(t, "2024-10-28T18:00:00+01:00")
		}, "", "", ""},

		{"unattended overnight 18:00–08:00", func(c *BookingCheck) {
			c.Kind, c.Start, c.End = KindUnattended, at("2024-03-04 18:00"), at("2024-03-05 08:00")
		}, "", "", ""},
		{"unattended from 17:00 overlaps an open hour", func(c *BookingCheck) {
			c.Kind, c.Start, c.End = KindUnattended, at("2024-03-04 17:00"), at("2024-03-05 08:00")
		}, "out_of_hours", "start", "1 h of this one falls inside"},
		{"unattended in the day", func(c *BookingCheck) { c.Kind = KindUnattended }, "out_of_hours", "", ""},
		{"unattended over the autumn change night", func(c *BookingCheck) {
			c.Kind, c.Now = KindUnattended, at("2024-10-20 09:00")
			c.Start, c.End = ruleTime(t, "2024-10-26T20:00:00+02:00"), ruleTime(t, "2024-10-27T08:00:00+01:00")
		}, "", "", ""},

		{"assisted without staff", func(c *BookingCheck) { c.Kind = KindAssisted }, "staff_required", "staff_id", "the staff member who assists"},
		{"training with blank staff", func(c *BookingCheck) { c.Kind, c.StaffID = KindTraining, "  " }, "staff_required", "staff_id", "the staff member who trains"},
		{"assisted with staff", func(c *BookingCheck) { c.Kind, c.StaffID = KindAssisted, "s1" }, "", "", ""},
		{"service by a researcher", func(c *BookingCheck) { c.Kind = KindService }, "service_by_staff", "kind", ""},
		{"service needs no qualification", func(c *BookingCheck) { c.Kind, c.ByStaff, c.Qualification = KindService, true, nil }, "", "", ""},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c := berlinCheck(t)
			tt.change(&c)
			err := CheckBooking(c)
			if got := ruleOf(t, err); got != tt.rule {
				t.Fatalf("rule = %q (%v), want %q", got, err, tt.rule)
			}
			if err == nil {
				if all := CheckAll(c); len(all) != 0 {
					t.Errorf("CheckAll = %v, want none", all)
				}
				return
			}
			be := err.(*beamledger.Error)
			if _, ok := be.Fields[tt.field]; tt.field != "" && !ok {
				t.Errorf("fields %v lack %q", be.Fields, tt.field)
			}
			if !strings.Contains(be.Message, tt.msg) {
				t.Errorf("message %q lacks %q", be.Message, tt.msg)
			}
		})
	}
}

func TestCheckBookingQualification(t *testing.T) {
	berlin := ruleZone(t, "Europe/Berlin")
	now := ruleWall(t, berlin, "2024-03-01 09:00")
	thirty := 30
	lastUsed := now.AddDate(0, 0, -31)
	revoked := now.Add(-time.Hour)
	revokedLater := now.Add(time.Hour)
	holdings := []struct {
		name string
		q    *Qualification
	}{
		{"none", nil},
		{"supervised", activeQualification(LevelSupervised)},
		{"independent", activeQualification(LevelIndependent)},
		{"unattended", activeQualification(LevelUnattended)},
		{"expired unattended", &Qualification{Level: LevelUnattended, GrantedAt: now.AddDate(-1, 0, 0), ExpiresAfterIdleDays: &thirty, LastUsedAt: &lastUsed}},
		{"revoked unattended", &Qualification{Level: LevelUnattended, GrantedAt: now.AddDate(-1, 0, 0), RevokedAt: &revoked}},
		{"revocation still ahead", &Qualification{Level: LevelUnattended, GrantedAt: now.AddDate(-1, 0, 0), RevokedAt: &revokedLater}},
		{"granted tomorrow", &Qualification{Level: LevelUnattended, GrantedAt: now.AddDate(0, 0, 1)}},
		{"unknown level", &Qualification{Level: "expert", GrantedAt: now.AddDate(-1, 0, 0)}},
	}
	// Allowed holdings per kind, from the glossary: supervised books assisted or training
	// time only; independent adds independent; unattended adds unattended. Training needs
	// no qualification at all [constructed: the project's rule — training is how a user
	// earns a first qualification, with a trainer present].
	allowed := map[BookingKind][]string{
		KindAssisted:    {"supervised", "independent", "unattended", "revocation still ahead"},
		KindTraining:    {"none", "supervised", "independent", "unattended", "expired unattended", "revoked unattended", "revocation still ahead", "granted tomorrow", "unknown level"},
		KindIndependent: {"independent", "unattended", "revocation still ahead"},
		KindUnattended:  {"unattended", "revocation still ahead"},
		KindService:     {"none", "supervised", "independent", "unattended", "expired unattended", "revoked unattended", "revocation still ahead", "granted tomorrow", "unknown level"},
	}
	messages := map[string]string{"none": "no qualification", "expired unattended": "expired on", "revoked unattended": "revoked", "granted tomorrow": "not in force yet", "unknown level": "no qualification"}
	for _, kind := range BookingKinds {
		for _, h := range holdings {
			t.Run(string(kind)+"/"+h.name, func(t *testing.T) {
				c := berlinCheck(t)
				c.Kind, c.Qualification, c.Now = kind, h.q, now
				switch kind {
				case KindUnattended:
					c.Start, c.End = ruleWall(t, berlin, "2024-03-04 18:00"), ruleWall(t, berlin, "2024-03-05 06:00")
				case KindAssisted, KindTraining:
					c.StaffID = "s1"
				case KindService:
					c.ByStaff = true
				}
				err := CheckBooking(c)
				want := ""
				if !slices.Contains(allowed[kind], h.name) {
					want = "qualification"
				}
				if got := ruleOf(t, err); got != want {
					t.Fatalf("rule = %q (%v), want %q", got, err, want)
				}
				if err != nil {
					be := err.(*beamledger.Error)
					msg := messages[h.name]
					if msg == "" {
						msg = "need qualification level"
					}
					if !strings.Contains(be.Message, msg) || be.Fields["kind"] == "" {
						t.Errorf("message %q (fields %v), want it to contain %q and name kind", be.Message, be.Fields, msg)
					}
				}
			})
		}
	}
}

func TestCheckBookingPrimeAllowance(t *testing.T) {
	berlin := ruleZone(t, "Europe/Berlin")
	at := func(s string) time.Time { return ruleWall(t, berlin, s) }
	// [constructed] prime time Mon–Fri 09:00–17:00 ([practice] default), 10 h a week.
	tests := []struct {
		name       string
		rules      func(*Rules)
		kind       BookingKind
		start, end string
		used       int
		rule       string
	}{
		{"fills the allowance exactly", nil, KindIndependent, "2024-03-04 08:00", "2024-03-04 12:00", 420, ""}, // 180 prime min
		{"a minute over", nil, KindIndependent, "2024-03-04 08:00", "2024-03-04 12:00", 421, "prime_allowance"},
		{"no prime minutes, allowance spent", nil, KindIndependent, "2024-03-04 17:00", "2024-03-04 18:00", 900, ""},
		{"unlimited when 0", func(r *Rules) { r.PrimeAllowanceMinutesPerWeek = 0 }, KindIndependent, "2024-03-04 09:00", "2024-03-04 17:00", 100000, ""},
		{"assisted counts", nil, KindAssisted, "2024-03-04 09:00", "2024-03-04 17:00", 121, "prime_allowance"},
		{"service does not count", nil, KindService, "2024-03-04 09:00", "2024-03-04 17:00", 600, ""},
		// Opening and prime time every hour: Sunday 22:00 to Monday 02:00 has 2 h in the
		// week of its start; PrimeUsedMinutes covers that week only.
		{"only the week of the start counts", func(r *Rules) {
			r.OpeningHours = []ClockWindow{{Start: "00:00", End: "24:00"}}
			r.PrimeTime = []ClockWindow{{Start: "00:00", End: "24:00"}}
			r.PrimeAllowanceMinutesPerWeek = 180
		}, KindIndependent, "2024-03-10 22:00", "2024-03-11 02:00", 60, ""},
		{"only the week of the start counts, over", func(r *Rules) {
			r.OpeningHours = []ClockWindow{{Start: "00:00", End: "24:00"}}
			r.PrimeTime = []ClockWindow{{Start: "00:00", End: "24:00"}}
			r.PrimeAllowanceMinutesPerWeek = 180
		}, KindIndependent, "2024-03-10 22:00", "2024-03-11 02:00", 61, "prime_allowance"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c := berlinCheck(t)
			c.Rules.PrimeAllowanceMinutesPerWeek = 600
			if tt.rules != nil {
				tt.rules(&c.Rules)
			}
			c.Kind, c.Start, c.End, c.PrimeUsedMinutes = tt.kind, at(tt.start), at(tt.end), tt.used
			c.StaffID, c.ByStaff = "s1", tt.kind == KindService
			if got := ruleOf(t, CheckBooking(c)); got != tt.rule {
				t.Errorf("rule = %q, want %q", got, tt.rule)
			}
		})
	}

	t.Run("a week of bookings", func(t *testing.T) {
		// [constructed] 2 h of prime time a day, Monday to Friday, fills 10 h; a sixth
		// booking that week is refused, and the next Monday starts afresh.
		starts := []string{"2024-03-04", "2024-03-05", "2024-03-06", "2024-03-07", "2024-03-08", "2024-03-08"}
		hours := []string{"10:00", "10:00", "10:00", "10:00", "10:00", "14:00"}
		used := 0
		for i := range starts {
			c := berlinCheck(t)
			c.Rules.PrimeAllowanceMinutesPerWeek = 600
			c.Start = at(starts[i] + " " + hours[i])
			c.End = c.Start.Add(2 * time.Hour)
			c.PrimeUsedMinutes = used
			err := CheckBooking(c)
			if i < 5 && err != nil {
				t.Fatalf("booking %d refused with %d min used: %v", i+1, used, err)
			}
			if i == 5 {
				if ruleOf(t, err) != "prime_allowance" || !strings.Contains(err.Error(), "limited to 10 h per project per week") ||
					!strings.Contains(err.Error(), "10 h in the week of Mon 2024-03-04") {
					t.Fatalf("sixth booking: %v, want prime_allowance", err)
				}
			}
			used += MinutesInside(c.Rules.PrimeTime, c.Start, c.End, berlin)
		}
		c := berlinCheck(t)
		c.Rules.PrimeAllowanceMinutesPerWeek = 600
		c.Start, c.End = at("2024-03-11 10:00"), at("2024-03-11 12:00")
		if err := CheckBooking(c); err != nil {
			t.Errorf("next week: %v", err)
		}
	})
}

func TestCheckBookingOrderAndCheckAll(t *testing.T) {
	berlin := ruleZone(t, "Europe/Berlin")
	c := berlinCheck(t)
	// Saturday, off the slot grid, with no qualification and no staff member named.
	c.Kind, c.Qualification = KindAssisted, nil
	c.Start, c.End = ruleWall(t, berlin, "2024-03-09 10:07"), ruleWall(t, berlin, "2024-03-09 12:00")
	if got := ruleOf(t, CheckBooking(c)); got != "slot" {
		t.Errorf("CheckBooking rule = %q, want the first, slot", got)
	}
	var rules []string
	for _, err := range CheckAll(c) {
		rules = append(rules, ruleOf(t, err))
	}
	if want := "slot opening_hours qualification staff_required"; strings.Join(rules, " ") != want {
		t.Errorf("CheckAll rules = %v, want %s", rules, want)
	}

	c.End = c.Start
	if all := CheckAll(c); len(all) != 1 || ruleOf(t, all[0]) != "range" {
		t.Errorf("CheckAll on an empty range = %v, want range alone", all)
	}

	c = berlinCheck(t)
	c.Kind = "overnight"
	for _, err := range []error{CheckBooking(c), CheckAll(c)[0]} {
		var be *beamledger.Error
		if !errors.Is(err, beamledger.ErrInvalid) || !errors.As(err, &be) || be.Fields["kind"] == "" {
			t.Errorf("unknown kind: %v, want ErrInvalid naming kind", err)
		}
	}

	c = berlinCheck(t)
	c.Loc = nil // read as UTC: 09:00–11:00 UTC is inside 08:00–18:00
	if err := CheckBooking(c); err != nil {
		t.Errorf("nil Loc: %v", err)
	}
}

func TestHumanDuration(t *testing.T) {
	for d, want := range map[time.Duration]string{
		0: "0 min", 15 * time.Minute: "15 min", time.Hour: "1 h", 90 * time.Minute: "1 h 30 min", 16 * time.Hour: "16 h", 90 * time.Second: "1 min",
	} {
		if got := humanDuration(d); got != want {
			t.Errorf("humanDuration(%v) = %q, want %q", d, got, want)
		}
	}
}
