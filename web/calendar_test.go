package web

import (
	"testing"
	"time"

	"beamledger/scheduling"
)

func berlin(t *testing.T) *time.Location {
	t.Helper()
	loc, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Fatal(err)
	}
	return loc
}

// Days on which the clocks change have 23 and 25 hours: in the EU summer time starts
// at 01:00 UTC on the last Sunday of March and ends at 01:00 UTC on the last Sunday
// of October [published: Directive 2000/84/EC, articles 2 and 3], so in 2026 on
// 29 March and 25 October.
func TestBuildColumnDSTDays(t *testing.T) {
	loc := berlin(t)
	weekdays := []scheduling.ClockWindow{{Days: []time.Weekday{1, 2, 3, 4, 5}, Start: "08:00", End: "18:00"}}
	for _, tc := range []struct {
		day      string
		slots    int
		repeated string // the label of the first slot of the repeated hour, if any
		note     bool
	}{
		{"2026-03-28", 96, "", false},
		{"2026-03-29", 92, "", true},
		{"2026-10-25", 100, "02:00 +01", true},
	} {
		day, _ := time.ParseInLocation(time.DateOnly, tc.day, loc)
		col := BuildColumn(ColumnInput{Day: day, Loc: loc, Slot: 15 * time.Minute, OpeningHours: weekdays})
		if len(col.Slots) != tc.slots {
			t.Errorf("%s: %d slots, want %d", tc.day, len(col.Slots), tc.slots)
		}
		if (col.ClockNote != "") != tc.note {
			t.Errorf("%s: clock note %q", tc.day, col.ClockNote)
		}
		var repeated string
		for _, s := range col.Slots {
			if s.Repeated {
				repeated = s.Label
				break
			}
		}
		if repeated != tc.repeated {
			t.Errorf("%s: first repeated slot %q, want %q", tc.day, repeated, tc.repeated)
		}
		// Consecutive slots are 15 minutes apart in elapsed time, whatever the clock shows.
		for i := 1; i < len(col.Slots); i++ {
			a, _ := time.Parse(time.RFC3339, col.Slots[i-1].Start)
			b, _ := time.Parse(time.RFC3339, col.Slots[i].Start)
			if b.Sub(a) != 15*time.Minute {
				t.Fatalf("%s: slots %s and %s are %s apart", tc.day, col.Slots[i-1].Start, col.Slots[i].Start, b.Sub(a))
			}
		}
	}
	// On the spring day the slot after 01:45 is 03:00 [constructed: the gap of the
	// directive's change at 01:00 UTC = 02:00 CET].
	day, _ := time.ParseInLocation(time.DateOnly, "2026-03-29", loc)
	col := BuildColumn(ColumnInput{Day: day, Loc: loc, Slot: 15 * time.Minute})
	if col.Slots[7].Label != "01:45" || col.Slots[8].Label != "03:00" {
		t.Errorf("around the gap: %q then %q", col.Slots[7].Label, col.Slots[8].Label)
	}
}

// Out-of-hours shading follows the opening hours in the facility zone, and a booking
// running past midnight is drawn to the end of its first day.
func TestBuildColumnHoursAndBlocks(t *testing.T) {
	loc := berlin(t)
	monday := time.Date(2026, 12, 7, 0, 0, 0, 0, loc)
	weekdays := []scheduling.ClockWindow{{Days: []time.Weekday{1, 2, 3, 4, 5}, Start: "08:00", End: "18:00"}}
	night := scheduling.Booking{ID: "n", Kind: scheduling.KindUnattended, Start: monday.Add(18 * time.Hour), End: monday.Add(32 * time.Hour)}
	col := BuildColumn(ColumnInput{Day: monday, Loc: loc, Slot: 15 * time.Minute, OpeningHours: weekdays,
		Bookings: []BookingView{{Booking: night, Mine: true}}})
	if !col.Slots[31].OutOfHours || col.Slots[32].OutOfHours || col.Slots[71].OutOfHours || !col.Slots[72].OutOfHours {
		t.Errorf("07:45 %v, 08:00 %v, 17:45 %v, 18:00 %v: want out, in, in, out",
			col.Slots[31].OutOfHours, col.Slots[32].OutOfHours, col.Slots[71].OutOfHours, col.Slots[72].OutOfHours)
	}
	if len(col.Blocks) != 1 || col.Blocks[0].Row != 73 || col.Blocks[0].Span != 24 || !col.Blocks[0].Mine || col.Blocks[0].Label != "18:00–08:00" {
		t.Fatalf("overnight block on its first day: %+v", col.Blocks)
	}
	next := BuildColumn(ColumnInput{Day: monday.AddDate(0, 0, 1), Loc: loc, Slot: 15 * time.Minute, Bookings: []BookingView{{Booking: night}}})
	if len(next.Blocks) != 1 || next.Blocks[0].Row != 1 || next.Blocks[0].Span != 32 {
		t.Fatalf("overnight block on its second day: %+v", next.Blocks)
	}
}
