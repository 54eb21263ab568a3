package web

import (
	"strconv"
	"time"

	"beamledger/scheduling"
)

// A calendar column is one day of one instrument, cut into slots of the instrument's
// booking grid. Slots are stepped in elapsed time from the column's local midnight to
// the next, so a day on which the clocks go forward has fewer slots and one on which
// they go back has more, each labelled with its own local time and offset.

// Slot is one free-or-taken step of a column.
type Slot struct {
	Row          int    // 1-based grid row
	Start, End   string // RFC 3339 with the facility offset
	Label        string // "09:15"
	OnHour       bool   // the first slot of a local hour: labelled on the page
	Repeated     bool   // in the hour that repeats when the clocks go back
	OutOfHours   bool   // outside the instrument's opening hours
	Past         bool   // ended before now
	Description  string // for screen readers: "Mon 30 Mar 09:15–09:30, out of hours"
	InstrumentID string
}

// Block is a booking drawn over the slots it covers, clipped to the column.
type Block struct {
	Row, Span    int
	ID           string
	InstrumentID string
	Kind         string
	Start, End   string // RFC 3339 with the facility offset, unclipped
	Label        string // "09:00–13:00"
	Mine         bool
	// Detail is the project code or note, shown only to those who may read the booking.
	Detail string
	// Changeable: the viewer may move, extend or cancel it.
	Changeable bool
}

// Column is one day of one instrument.
type Column struct {
	Heading      string // "Mon 30 Mar" or an instrument code
	InstrumentID string
	Date         string // YYYY-MM-DD, local
	Slots        []Slot
	Blocks       []Block
	// ClockNote says when the day is not 24 hours long.
	ClockNote string
}

// BookingView is what the calendar knows of a booking before drawing it.
type BookingView struct {
	scheduling.Booking
	Mine, Changeable bool
	Detail           string
}

// ColumnInput is what BuildColumn needs: plain values, no storage.
type ColumnInput struct {
	Heading      string
	InstrumentID string
	Day          time.Time // any instant on the local day
	Loc          *time.Location
	Slot         time.Duration
	OpeningHours []scheduling.ClockWindow
	Now          time.Time
	Bookings     []BookingView
}

// LocalMidnight is the first instant of t's local day in loc.
func LocalMidnight(t time.Time, loc *time.Location) time.Time {
	t = t.In(loc)
	return time.Date(t.Year(), t.Month(), t.Day(), 0, 0, 0, 0, loc)
}

// BuildColumn cuts one local day into slots and places the bookings over them.
func BuildColumn(in ColumnInput) Column {
	from := LocalMidnight(in.Day, in.Loc)
	to := LocalMidnight(from.AddDate(0, 0, 1), in.Loc)
	col := Column{Heading: in.Heading, InstrumentID: in.InstrumentID, Date: from.Format(time.DateOnly)}
	switch h := to.Sub(from).Hours(); {
	case h < 24:
		col.ClockNote = "the clocks go forward: this day has " + hoursText(h)
	case h > 24:
		col.ClockNote = "the clocks go back: this day has " + hoursText(h) + ", one hour runs twice"
	}
	seen := map[string]bool{}
	row := 0
	for t := from; t.Before(to); t = t.Add(in.Slot) {
		row++
		end := t.Add(in.Slot)
		local := t.In(in.Loc)
		label := local.Format("15:04")
		s := Slot{Row: row, Start: local.Format(time.RFC3339), End: end.In(in.Loc).Format(time.RFC3339), Label: label,
			OnHour: local.Minute() == 0 || row == 1, Repeated: seen[label], Past: !end.After(in.Now), InstrumentID: in.InstrumentID}
		seen[label] = true
		if s.Repeated {
			s.Label = label + " " + local.Format("-07")
		}
		s.OutOfHours = !scheduling.Inside(in.OpeningHours, t, end, in.Loc)
		s.Description = local.Format("Mon 2 Jan ") + s.Label + "–" + end.In(in.Loc).Format("15:04")
		if s.OutOfHours {
			s.Description += ", out of hours"
		}
		col.Slots = append(col.Slots, s)
	}
	for _, b := range in.Bookings {
		if !b.Start.Before(to) || !b.End.After(from) {
			continue
		}
		start, end := b.Start, b.End
		if start.Before(from) {
			start = from
		}
		if end.After(to) {
			end = to
		}
		first := int(start.Sub(from)/in.Slot) + 1
		last := int((end.Sub(from) + in.Slot - 1) / in.Slot)
		col.Blocks = append(col.Blocks, Block{Row: first, Span: max(1, last-first+1), ID: b.ID, InstrumentID: b.InstrumentID,
			Kind: string(b.Kind), Start: b.Start.In(in.Loc).Format(time.RFC3339), End: b.End.In(in.Loc).Format(time.RFC3339),
			Label: b.Start.In(in.Loc).Format("15:04") + "–" + b.End.In(in.Loc).Format("15:04"), Mine: b.Mine, Detail: b.Detail,
			Changeable: b.Changeable})
	}
	return col
}

func hoursText(h float64) string {
	return strconv.FormatFloat(h, 'f', -1, 64) + " hours"
}
