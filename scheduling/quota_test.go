package scheduling

import (
	"errors"
	"reflect"
	"testing"
	"time"

	"beamledger"
)

func TestPeriodBounds(t *testing.T) {
	berlin := ruleZone(t, "Europe/Berlin")
	tests := []struct {
		name       string
		p          Period
		at         string // RFC 3339
		zone       string
		start, end string // RFC 3339
		hours      int
	}{
		// [computed] Monday 21 Oct 00:00 CEST to Monday 28 Oct 00:00 CET: 7 × 24 h + the hour repeated on the 27th.
		{"week of the autumn change", PeriodWeek, "2024-10-23T15:00:00+02:00", "Europe/Berlin", "2024-10-21T00:00:00+02:00", "2024-10-28T00:00:00+01:00", 169},
		{"its last minute, Sunday", PeriodWeek, "2024-10-27T23:59:00+01:00", "Europe/Berlin", "2024-10-21T00:00:00+02:00", "2024-10-28T00:00:00+01:00", 169},
		{"the next Monday starts a week", PeriodWeek, "2024-10-28T00:00:00+01:00", "Europe/Berlin", "2024-10-28T00:00:00+01:00", "2024-11-04T00:00:00+01:00", 168},
		// [computed] the spring change takes an hour out.
		{"week of the spring change", PeriodWeek, "2024-03-31T12:00:00+02:00", "Europe/Berlin", "2024-03-25T00:00:00+01:00", "2024-04-01T00:00:00+02:00", 167},
		// ISO 8601 weeks run Monday to Sunday across the new year.
		{"week across the new year", PeriodWeek, "2025-01-01T12:00:00+01:00", "Europe/Berlin", "2024-12-30T00:00:00+01:00", "2025-01-06T00:00:00+01:00", 168},
		// Monday 03:00 in Kolkata is still Sunday in UTC.
		{"week read locally", PeriodWeek, "2024-03-04T03:00:00+05:30", "Asia/Kolkata", "2024-03-04T00:00:00+05:30", "2024-03-11T00:00:00+05:30", 168},
		// [computed] 31 × 24 h less the hour skipped on 31 March.
		{"March in Berlin", PeriodMonth, "2024-03-15T12:00:00+01:00", "Europe/Berlin", "2024-03-01T00:00:00+01:00", "2024-04-01T00:00:00+02:00", 743},
		{"leap February", PeriodMonth, "2024-02-29T23:59:00+01:00", "Europe/Berlin", "2024-02-01T00:00:00+01:00", "2024-03-01T00:00:00+01:00", 696},
		{"October in Berlin", PeriodMonth, "2024-10-01T00:00:00+02:00", "Europe/Berlin", "2024-10-01T00:00:00+02:00", "2024-11-01T00:00:00+01:00", 745},
		{"December runs into the next year", PeriodMonth, "2024-12-31T23:00:00+01:00", "Europe/Berlin", "2024-12-01T00:00:00+01:00", "2025-01-01T00:00:00+01:00", 744},
		// [computed] tzdata: Asunción skipped 2023-10-01 00:00–01:00, so October starts at
		// 01:00 −03 (the skipped midnight read with the offset before it) and September,
		// ending there, keeps its 720 h.
		{"September before a midnight gap", PeriodMonth, "2023-09-15T12:00:00-04:00", "America/Asuncion", "2023-09-01T00:00:00-04:00", "2023-10-01T01:00:00-03:00", 720},
		{"October starting in a midnight gap", PeriodMonth, "2023-10-15T12:00:00-03:00", "America/Asuncion", "2023-10-01T01:00:00-03:00", "2023-11-01T00:00:00-03:00", 743},
		// [computed] 92 days plus the repeated hour.
		{"fourth quarter", PeriodQuarter, "2024-11-15T12:00:00+01:00", "Europe/Berlin", "2024-10-01T00:00:00+02:00", "2025-01-01T00:00:00+01:00", 2209},
		{"first quarter", PeriodQuarter, "2024-03-31T23:59:00+02:00", "Europe/Berlin", "2024-01-01T00:00:00+01:00", "2024-04-01T00:00:00+02:00", 2183},
		{"second quarter", PeriodQuarter, "2024-04-01T00:00:00+02:00", "Europe/Berlin", "2024-04-01T00:00:00+02:00", "2024-07-01T00:00:00+02:00", 2184},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			start, end := PeriodBounds(tt.p, ruleTime(t, tt.at), ruleZone(t, tt.zone))
			if !start.Equal(ruleTime(t, tt.start)) || !end.Equal(ruleTime(t, tt.end)) {
				t.Errorf("bounds = %s – %s, want %s – %s", start.Format(time.RFC3339), end.Format(time.RFC3339), tt.start, tt.end)
			}
			if h := end.Sub(start); h != time.Duration(tt.hours)*time.Hour {
				t.Errorf("period lasts %v, want %d h", h, tt.hours)
			}
		})
	}

	t.Run("invalid period is empty", func(t *testing.T) {
		at := ruleTime(t, "2024-03-15T12:00:00Z")
		if start, end := PeriodBounds("fortnight", at, berlin); !start.Equal(at) || !end.Equal(at) {
			t.Errorf("bounds = %v – %v, want both %v", start, end, at)
		}
	})

	t.Run("periods tile", func(t *testing.T) {
		for _, zone := range []string{"Europe/Berlin", "America/Asuncion", "Asia/Kolkata", "America/New_York"} {
			loc := ruleZone(t, zone)
			for _, p := range Periods {
				for at := ruleTime(t, "2023-01-01T00:00:00Z"); at.Year() < 2025; at = at.Add(13 * time.Hour) {
					start, end := PeriodBounds(p, at, loc)
					if at.Before(start) || !at.Before(end) {
						t.Fatalf("%s %s: %v not in [%v, %v)", zone, p, at, start, end)
					}
					if next, _ := PeriodBounds(p, end, loc); !next.Equal(end) {
						t.Fatalf("%s %s: period after [%v, %v) starts at %v", zone, p, start, end, next)
					}
				}
			}
		}
	})
}

func TestFairShare(t *testing.T) {
	berlin := ruleZone(t, "Europe/Berlin")
	at := func(s string) time.Time { return ruleWall(t, berlin, s) }
	iv := func(from, to string) Interval { return Interval{at(from), at(to)} }
	p1, p2, p3, p4, p5 := ShareKey{"p1", "i1"}, ShareKey{"p2", "i1"}, ShareKey{"p3", "i1"}, ShareKey{"p4", "i2"}, ShareKey{"p5", "i1"}
	p1i0, p1i2 := ShareKey{"p1", "i0"}, ShareKey{"p1", "i2"}
	// [constructed] a March report in Berlin.
	quotas := []Quota{
		{ProjectID: "p1", InstrumentID: "i1", Period: PeriodMonth, AllocatedMinutes: 600},
		{ProjectID: "p1", InstrumentID: "i1", Period: PeriodWeek, AllocatedMinutes: 9999}, // another period: ignored
		{ProjectID: "p2", InstrumentID: "i1", Period: PeriodMonth, AllocatedMinutes: 300},
		{ProjectID: "p2", InstrumentID: "i1", Period: PeriodMonth, AllocatedMinutes: 300}, // adds up
		{ProjectID: "p4", InstrumentID: "i2", Period: PeriodMonth, AllocatedMinutes: 120},
		{ProjectID: "p1", InstrumentID: "i0", Period: PeriodMonth, AllocatedMinutes: 60},
	}
	booked := map[ShareKey][]Interval{
		p1: {
			iv("2024-02-29 23:00", "2024-03-01 01:00"), // 60 min inside the month
			iv("2024-03-10 10:00", "2024-03-10 12:00"), // 120
			iv("2024-03-31 23:00", "2024-04-01 01:00"), // 60: the month ends at midnight CEST
			iv("2024-04-02 10:00", "2024-04-02 12:00"), // after the month
			iv("2024-03-20 12:00", "2024-03-20 10:00"), // reversed: nothing
		},
		p2:   {iv("2024-03-05 09:00", "2024-03-05 13:10")}, // 250
		p3:   {iv("2024-02-10 10:00", "2024-02-10 12:00")}, // outside: no line
		p1i2: {iv("2024-03-12 10:00", "2024-03-12 10:30")},
	}
	used := map[ShareKey][]Interval{
		p1: {
			iv("2024-03-10 10:05", "2024-03-10 11:55"),
			iv("2024-03-10 11:00", "2024-03-10 12:10"),                             // overlaps: together 10:05–12:10, 125 min
			{at("2024-03-01 00:00").Add(30 * time.Second), at("2024-03-01 00:10")}, // 9 min 30 s
		},
		p5: {iv("2024-03-05 10:00", "2024-03-05 11:00")}, // used with no quota
	}
	from, to := at("2024-03-01 00:00"), at("2024-04-01 00:00")
	line := func(k ShareKey, alloc, booked, used, bookedPm, usedPm int) ShareLine {
		return ShareLine{ProjectID: k.ProjectID, InstrumentID: k.InstrumentID, PeriodStart: from, PeriodEnd: to,
			AllocatedMinutes: alloc, BookedMinutes: booked, UsedMinutes: used, BookedPermille: bookedPm, UsedPermille: usedPm}
	}
	want := []ShareLine{
		line(p1i0, 60, 0, 0, 0, 0),
		line(p1, 600, 240, 134, 400, 223), // 134 min 30 s rounds down; 223.3 ‰
		line(p1i2, 0, 30, 0, 0, 0),
		line(p2, 600, 250, 0, 417, 0), // 416.7 ‰ rounds up
		line(p4, 120, 0, 0, 0, 0),
		line(p5, 0, 0, 60, 0, 0), // nothing allocated: share 0, minutes tell
	}
	got := FairShare(PeriodMonth, at("2024-03-15 12:00"), berlin, quotas, booked, used)
	if len(got) != len(want) {
		t.Fatalf("got %d lines, want %d: %+v", len(got), len(want), got)
	}
	for i := range want {
		if !got[i].PeriodStart.Equal(want[i].PeriodStart) || !got[i].PeriodEnd.Equal(want[i].PeriodEnd) {
			t.Errorf("line %d period %v – %v, want %v – %v", i, got[i].PeriodStart, got[i].PeriodEnd, from, to)
		}
		got[i].PeriodStart, got[i].PeriodEnd = want[i].PeriodStart, want[i].PeriodEnd
		if !reflect.DeepEqual(got[i], want[i]) {
			t.Errorf("line %d = %+v\nwant     %+v", i, got[i], want[i])
		}
	}
	if used[p1][0] != iv("2024-03-10 10:05", "2024-03-10 11:55") {
		t.Error("FairShare changed its input")
	}
}

func TestPermille(t *testing.T) {
	tests := []struct{ part, whole, want int }{
		{0, 600, 0}, {600, 600, 1000}, {900, 600, 1500}, {1, 2000, 1}, {1, 2001, 0}, {5, 0, 0},
	}
	for _, tt := range tests {
		if got := permille(tt.part, tt.whole); got != tt.want {
			t.Errorf("permille(%d, %d) = %d, want %d", tt.part, tt.whole, got, tt.want)
		}
	}
}

func TestQuotaValidate(t *testing.T) {
	good := Quota{ProjectID: "p1", InstrumentID: "i1", Period: PeriodMonth, AllocatedMinutes: 600}
	if err := good.Validate(); err != nil {
		t.Fatalf("Validate = %v", err)
	}
	tests := []struct {
		name   string
		mutate func(*Quota)
		field  string
	}{
		{"no project", func(q *Quota) { q.ProjectID = " " }, "project_id"},
		{"no instrument", func(q *Quota) { q.InstrumentID = "" }, "instrument_id"},
		{"unknown period", func(q *Quota) { q.Period = "year" }, "period"},
		{"negative minutes", func(q *Quota) { q.AllocatedMinutes = -1 }, "allocated_minutes"},
		{"more than a quarter holds", func(q *Quota) { q.AllocatedMinutes = 92*24*60 + 1 }, "allocated_minutes"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			q := good
			tt.mutate(&q)
			var be *beamledger.Error
			if err := q.Validate(); !errors.Is(err, beamledger.ErrInvalid) || !errors.As(err, &be) || len(be.Fields) != 1 || be.Fields[tt.field] == "" {
				t.Errorf("Validate = %v, want ErrInvalid naming only %s", err, tt.field)
			}
		})
	}
}
