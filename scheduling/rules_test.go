package scheduling

import (
	"encoding/json"
	"errors"
	"reflect"
	"testing"
	"time"
	_ "time/tzdata" // the zones below, even where the system has no zoneinfo

	"beamledger"
)

// ruleZone loads an IANA zone or stops the test.
func ruleZone(t *testing.T, name string) *time.Location {
	t.Helper()
	loc, err := time.LoadLocation(name)
	if err != nil {
		t.Fatal(err)
	}
	return loc
}

// ruleWall reads "2006-01-02 15:04" in loc; it refuses wall times that do not exist, so
// use ruleTime (with an offset) on days the clocks change.
func ruleWall(t *testing.T, loc *time.Location, s string) time.Time {
	t.Helper()
	const layout = "2006-01-02 15:04"
	v, err := time.ParseInLocation(layout, s, loc)
	if err != nil || v.Format(layout) != s {
		t.Fatalf("wall time %q in %s: %v", s, loc, err)
	}
	return v
}

// ruleTime reads an RFC 3339 instant.
func ruleTime(t *testing.T, s string) time.Time {
	t.Helper()
	v, err := time.Parse(time.RFC3339, s)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

var ruleMonFri = []time.Weekday{time.Monday, time.Tuesday, time.Wednesday, time.Thursday, time.Friday}

func TestClockInstant(t *testing.T) {
	tests := []struct {
		name, zone string
		y          int
		m          time.Month
		d, minute  int
		want       string
	}{
		// [published: RFC 5545 §3.3.5, as quoted in REFERENCE.md §2] a gap is read with the offset before it.
		{"New York gap", "America/New_York", 2007, time.March, 11, 2*60 + 30, "2007-03-11T03:30:00-04:00"},
		// [computed] Berlin jumps 02:00 CET → 03:00 CEST on 2024-03-31.
		{"Berlin gap", "Europe/Berlin", 2024, time.March, 31, 2*60 + 30, "2024-03-31T03:30:00+02:00"},
		// [published: RFC 5545 §3.3.5] a time that occurs twice means the first occurrence.
		{"Berlin overlap", "Europe/Berlin", 2024, time.October, 27, 2*60 + 30, "2024-10-27T02:30:00+02:00"},
		{"Berlin just after overlap", "Europe/Berlin", 2024, time.October, 27, 3 * 60, "2024-10-27T03:00:00+01:00"},
		// [computed] tzdata: Asunción skipped 2023-10-01 00:00–01:00 (−04 → −03 at 04:00 UTC).
		{"Asunción midnight gap", "America/Asuncion", 2023, time.October, 1, 0, "2023-10-01T01:00:00-03:00"},
		{"Kolkata", "Asia/Kolkata", 2024, time.March, 4, 9 * 60, "2024-03-04T09:00:00+05:30"},
		// minutes past 24:00 run into the next day: Saturday + 34 h is Sunday 10:00 CET.
		{"past midnight", "Europe/Berlin", 2024, time.October, 26, 34 * 60, "2024-10-27T10:00:00+01:00"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := clockInstant(tt.y, tt.m, tt.d, tt.minute, ruleZone(t, tt.zone))
			if want := ruleTime(t, tt.want); !got.Equal(want) {
				t.Errorf("got %s, want %s", got.Format(time.RFC3339), tt.want)
			}
		})
	}
}

func TestMinutesInside(t *testing.T) {
	berlin, kolkata := ruleZone(t, "Europe/Berlin"), ruleZone(t, "Asia/Kolkata")
	officeHours := []ClockWindow{{Days: ruleMonFri, Start: "08:00", End: "18:00"}}
	nights := []ClockWindow{{Days: ruleMonFri, Start: "18:00", End: "08:00"}}
	tests := []struct {
		name       string
		windows    []ClockWindow
		start, end time.Time
		loc        *time.Location
		want       int
	}{
		// [constructed] five 10-hour days; the autumn change on Sunday does not touch them.
		{"week of the autumn change", officeHours, ruleTime(t, "2024-10-21T00:00:00+02:00"), ruleTime(t, "2024-10-28T00:00:00+01:00"), berlin, 3000},
		// [computed] 01:00 CEST to 04:00 CET is 4 h elapsed; 01:00 CET to 04:00 CEST is 2 h.
		{"autumn night holds 4 h", []ClockWindow{{Start: "01:00", End: "04:00"}}, ruleTime(t, "2024-10-27T00:00:00+02:00"), ruleTime(t, "2024-10-28T00:00:00+01:00"), berlin, 240},
		{"spring night holds 2 h", []ClockWindow{{Start: "01:00", End: "04:00"}}, ruleTime(t, "2024-03-31T00:00:00+01:00"), ruleTime(t, "2024-04-01T00:00:00+02:00"), berlin, 120},
		// [constructed] Mon–Fri 18:00–08:00: Friday's night runs to Saturday 08:00 (14 h);
		// Saturday and Sunday start no window.
		{"overnight, Friday noon to Monday noon", nights, ruleWall(t, berlin, "2024-03-08 12:00"), ruleWall(t, berlin, "2024-03-11 12:00"), berlin, 14 * 60},
		{"overnight, Thursday 20:00 to Friday 09:00", nights, ruleWall(t, berlin, "2024-03-07 20:00"), ruleWall(t, berlin, "2024-03-08 09:00"), berlin, 12 * 60},
		{"Sunday night starts no window", nights, ruleWall(t, berlin, "2024-03-10 12:00"), ruleWall(t, berlin, "2024-03-11 12:00"), berlin, 0},
		{"the night before the range counts", []ClockWindow{{Start: "22:00", End: "06:00"}}, ruleWall(t, berlin, "2024-03-09 00:00"), ruleWall(t, berlin, "2024-03-09 03:00"), berlin, 180},
		{"overlapping windows count once", []ClockWindow{{Start: "08:00", End: "12:00"}, {Start: "10:00", End: "14:00"}}, ruleWall(t, berlin, "2024-03-04 00:00"), ruleWall(t, berlin, "2024-03-05 00:00"), berlin, 360},
		{"equal start and end span a day", []ClockWindow{{Start: "00:00", End: "00:00"}}, ruleWall(t, berlin, "2024-03-04 00:00"), ruleWall(t, berlin, "2024-03-06 00:00"), berlin, 2880},
		{"24:00 ends at midnight", []ClockWindow{{Start: "20:00", End: "24:00"}}, ruleWall(t, berlin, "2024-03-04 00:00"), ruleWall(t, berlin, "2024-03-05 00:00"), berlin, 240},
		// [constructed] 03:00–05:00 UTC is 08:30–10:30 IST; the window opens at 09:00 local.
		{"Kolkata half-hour offset", []ClockWindow{{Days: ruleMonFri, Start: "09:00", End: "17:00"}}, ruleTime(t, "2024-03-04T03:00:00Z"), ruleTime(t, "2024-03-04T05:00:00Z"), kolkata, 90},
		{"malformed window counts nothing", []ClockWindow{{Start: "8:00", End: "18:00"}}, ruleWall(t, berlin, "2024-03-04 00:00"), ruleWall(t, berlin, "2024-03-05 00:00"), berlin, 0},
		{"empty range", officeHours, ruleWall(t, berlin, "2024-03-04 10:00"), ruleWall(t, berlin, "2024-03-04 10:00"), berlin, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := MinutesInside(tt.windows, tt.start, tt.end, tt.loc); got != tt.want {
				t.Errorf("MinutesInside = %d, want %d", got, tt.want)
			}
		})
	}
}

func TestInside(t *testing.T) {
	berlin := ruleZone(t, "Europe/Berlin")
	day := []ClockWindow{{Days: ruleMonFri, Start: "08:00", End: "18:00"}}
	dayAndNight := append([]ClockWindow{{Days: ruleMonFri, Start: "18:00", End: "08:00"}}, day...)
	tests := []struct {
		name       string
		windows    []ClockWindow
		start, end string
		want       bool
	}{
		{"the whole window", day, "2024-03-04 08:00", "2024-03-04 18:00", true},
		{"a minute early", day, "2024-03-04 07:59", "2024-03-04 18:00", false},
		{"a minute late", day, "2024-03-04 08:00", "2024-03-04 18:01", false},
		{"Saturday", day, "2024-03-09 10:00", "2024-03-09 12:00", false},
		{"two windows back to back", dayAndNight, "2024-03-04 17:00", "2024-03-05 09:00", true},
		{"empty range is inside nothing", day, "2024-03-04 10:00", "2024-03-04 10:00", false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := Inside(tt.windows, ruleWall(t, berlin, tt.start), ruleWall(t, berlin, tt.end), berlin)
			if got != tt.want {
				t.Errorf("Inside = %v, want %v", got, tt.want)
			}
		})
	}
}

func TestDescribeWindows(t *testing.T) {
	berlin := ruleZone(t, "Europe/Berlin")
	tests := []struct {
		windows []ClockWindow
		want    string
	}{
		{DefaultRules().OpeningHours, "Mon–Fri 08:00–18:00 Europe/Berlin"},
		{[]ClockWindow{{Days: []time.Weekday{time.Sunday, time.Saturday}, Start: "10:00", End: "14:00"}}, "Sat, Sun 10:00–14:00 Europe/Berlin"},
		{[]ClockWindow{{Days: []time.Weekday{time.Sunday, time.Monday, time.Wednesday, time.Thursday, time.Friday}, Start: "18:00", End: "08:00"}}, "Mon, Wed–Fri, Sun 18:00–08:00 Europe/Berlin"},
		{[]ClockWindow{{Start: "00:00", End: "24:00"}, {Days: []time.Weekday{time.Saturday}, Start: "09:00", End: "13:00"}}, "every day 00:00–24:00; Sat 09:00–13:00 Europe/Berlin"},
		{nil, "none"},
	}
	for _, tt := range tests {
		if got := describeWindows(tt.windows, berlin); got != tt.want {
			t.Errorf("describeWindows(%v) = %q, want %q", tt.windows, got, tt.want)
		}
	}
}

func TestRulesWith(t *testing.T) {
	ptr := func(n int) *int { return &n }
	tests := []struct {
		name     string
		override RulesOverride
		want     func(*Rules) // applied to DefaultRules()
	}{
		{"empty override inherits everything", RulesOverride{}, func(*Rules) {}},
		{"set integers replace", RulesOverride{SlotMinutes: ptr(60), HorizonDays: ptr(30), PrimeAllowanceMinutesPerWeek: ptr(600)}, func(r *Rules) {
			r.SlotMinutes, r.HorizonDays, r.PrimeAllowanceMinutesPerWeek = 60, 30, 600
		}},
		{"zero is a value, not inherit", RulesOverride{MinLengthMinutes: ptr(0)}, func(r *Rules) { r.MinLengthMinutes = 0 }},
		{"non-nil empty windows clear", RulesOverride{PrimeTime: []ClockWindow{}}, func(r *Rules) { r.PrimeTime = []ClockWindow{} }},
		{"windows replace", RulesOverride{OpeningHours: []ClockWindow{{Start: "00:00", End: "24:00"}}}, func(r *Rules) {
			r.OpeningHours = []ClockWindow{{Start: "00:00", End: "24:00"}}
		}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			want := DefaultRules()
			tt.want(&want)
			if got := DefaultRules().With(tt.override); !reflect.DeepEqual(got, want) {
				t.Errorf("With = %+v\nwant   %+v", got, want)
			}
		})
	}

	t.Run("shares no slices", func(t *testing.T) {
		base := DefaultRules()
		o := RulesOverride{PrimeTime: []ClockWindow{{Days: []time.Weekday{time.Monday}, Start: "09:00", End: "12:00"}}}
		got := base.With(o)
		o.PrimeTime[0].Days[0] = time.Sunday
		base.OpeningHours[0].Days[0] = time.Sunday
		if got.PrimeTime[0].Days[0] != time.Monday || got.OpeningHours[0].Days[0] != time.Monday {
			t.Errorf("result changed with its inputs: %+v", got)
		}
	})
}

func TestRulesOverrideJSON(t *testing.T) {
	tests := []struct {
		in        string
		wantPrime []ClockWindow // nil: inherit
	}{
		{`{}`, nil},
		{`{"prime_time": null}`, nil},
		{`{"prime_time": []}`, []ClockWindow{}},
	}
	for _, tt := range tests {
		var o RulesOverride
		if err := json.Unmarshal([]byte(tt.in), &o); err != nil {
			t.Fatal(err)
		}
		// Decoded and after a round trip the override must mean the same.
		again, _ := json.Marshal(o)
		var o2 RulesOverride
		if err := json.Unmarshal(again, &o2); err != nil {
			t.Fatal(err)
		}
		for _, got := range []RulesOverride{o, o2} {
			if (got.PrimeTime == nil) != (tt.wantPrime == nil) || len(got.PrimeTime) != len(tt.wantPrime) {
				t.Errorf("%s: prime_time decoded as %#v, want %#v", tt.in, got.PrimeTime, tt.wantPrime)
			}
		}
	}
}

func TestRulesJSONNames(t *testing.T) {
	b, err := json.Marshal(DefaultRules())
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"slot_minutes", "min_length_minutes", "max_length_minutes", "max_unattended_length_minutes",
		"lead_time_minutes", "horizon_days", "no_show_grace_minutes", "prime_allowance_minutes_per_week", "opening_hours", "prime_time"} {
		if _, ok := m[k]; !ok {
			t.Errorf("JSON lacks %q: %s", k, b)
		}
	}
	if len(m) != 10 {
		t.Errorf("JSON has %d keys, want 10: %s", len(m), b)
	}
}

func TestDefaultRules(t *testing.T) {
	r := DefaultRules()
	// [practice] common defaults in shared microscopy facilities; no-show grace from
	// REFERENCE.md §3 (the project's default billing policy).
	want := Rules{
		SlotMinutes: 15, MinLengthMinutes: 30, MaxLengthMinutes: 720, MaxUnattendedLengthMinutes: 960,
		LeadTimeMinutes: 0, HorizonDays: 90, NoShowGraceMinutes: 30, PrimeAllowanceMinutesPerWeek: 0,
		OpeningHours: []ClockWindow{{Days: ruleMonFri, Start: "08:00", End: "18:00"}},
		PrimeTime:    []ClockWindow{{Days: ruleMonFri, Start: "09:00", End: "17:00"}},
	}
	if !reflect.DeepEqual(r, want) {
		t.Errorf("DefaultRules = %+v\nwant          %+v", r, want)
	}
	if err := r.Validate(); err != nil {
		t.Errorf("DefaultRules do not validate: %v", err)
	}
}

func TestRulesValidate(t *testing.T) {
	tests := []struct {
		name   string
		mutate func(*Rules)
		field  string
	}{
		{"slot zero", func(r *Rules) { r.SlotMinutes = 0 }, "slot_minutes"},
		{"slot not dividing a day", func(r *Rules) { r.SlotMinutes = 7 }, "slot_minutes"},
		{"slot over four hours", func(r *Rules) { r.SlotMinutes = 480 }, "slot_minutes"},
		{"negative minimum", func(r *Rules) { r.MinLengthMinutes = -1 }, "min_length_minutes"},
		{"minimum above maximum", func(r *Rules) { r.MinLengthMinutes = 721 }, "min_length_minutes"},
		{"minimum above unattended maximum", func(r *Rules) { r.MaxUnattendedLengthMinutes = 20 }, "min_length_minutes"},
		{"maximum zero", func(r *Rules) { r.MaxLengthMinutes, r.MinLengthMinutes = 0, 0 }, "max_length_minutes"},
		{"maximum over a month", func(r *Rules) { r.MaxLengthMinutes = 31*24*60 + 1 }, "max_length_minutes"},
		{"unattended maximum zero", func(r *Rules) { r.MaxUnattendedLengthMinutes, r.MinLengthMinutes = 0, 0 }, "max_unattended_length_minutes"},
		{"negative lead time", func(r *Rules) { r.LeadTimeMinutes = -5 }, "lead_time_minutes"},
		{"lead time reaching the horizon", func(r *Rules) { r.HorizonDays, r.LeadTimeMinutes = 1, 24*60 }, "lead_time_minutes"},
		{"horizon zero", func(r *Rules) { r.HorizonDays = 0 }, "horizon_days"},
		{"negative grace", func(r *Rules) { r.NoShowGraceMinutes = -1 }, "no_show_grace_minutes"},
		{"allowance over a week", func(r *Rules) { r.PrimeAllowanceMinutesPerWeek = 7*24*60 + 1 }, "prime_allowance_minutes_per_week"},
		{"no opening hours", func(r *Rules) { r.OpeningHours = nil }, "opening_hours"},
		{"opening start without leading zero", func(r *Rules) { r.OpeningHours[0].Start = "8:00" }, "opening_hours"},
		{"opening start at 24:00", func(r *Rules) { r.OpeningHours[0].Start = "24:00" }, "opening_hours"},
		{"opening end past 24:00", func(r *Rules) { r.OpeningHours[0].End = "24:01" }, "opening_hours"},
		{"opening minute 60", func(r *Rules) { r.OpeningHours[0].End = "17:60" }, "opening_hours"},
		{"prime day 7", func(r *Rules) { r.PrimeTime[0].Days = []time.Weekday{7} }, "prime_time"},
		{"prime end not a time", func(r *Rules) { r.PrimeTime[0].End = "5pm" }, "prime_time"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := DefaultRules()
			tt.mutate(&r)
			err := r.Validate()
			var be *beamledger.Error
			if !errors.As(err, &be) || !errors.Is(err, beamledger.ErrInvalid) {
				t.Fatalf("Validate = %v, want an ErrInvalid naming %s", err, tt.field)
			}
			if _, ok := be.Fields[tt.field]; !ok || len(be.Fields) != 1 {
				t.Errorf("fields = %v, want only %s", be.Fields, tt.field)
			}
		})
	}
	t.Run("edges that are fine", func(t *testing.T) {
		r := DefaultRules()
		r.SlotMinutes, r.MinLengthMinutes = 240, 0
		r.OpeningHours = []ClockWindow{{Days: []time.Weekday{time.Sunday, time.Saturday}, Start: "00:00", End: "24:00"}, {Start: "23:59", End: "00:00"}}
		r.PrimeTime = nil
		if err := r.Validate(); err != nil {
			t.Errorf("Validate = %v", err)
		}
	})
}
