// Package calendar renders bookings as RFC 5545 iCalendar feeds, the text a
// calendar program fetches when someone subscribes to their bookings or to an
// instrument's.
//
// It is the only importer of its iCalendar library. The library writes the
// calendar, folds long lines at 75 octets on UTF-8 boundaries and escapes TEXT
// values; this package turns its output line ends into CRLF and cleans every
// text value before handing it over, because the library passes carriage
// returns and other control characters through unescaped and counts an invalid
// UTF-8 byte as three octets when folding, which can then cut a later
// character in two.
package calendar

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	ics "github.com/arran4/golang-ical"

	"beamledger/scheduling"
)

// ErrInvalid is returned, wrapped with the reason, when a feed or one of its
// entries cannot be written as a valid calendar.
var ErrInvalid = errors.New("calendar: invalid feed")

// Entry is one booking as a feed shows it.
type Entry struct {
	Booking        scheduling.Booking
	InstrumentName string
	// Summary and Description are what the subscriber may see: the caller
	// decides what is private (for someone else's booking, only "Booked" and
	// the kind). Nothing else from the booking, such as its Note, is written.
	Summary, Description string
}

// Feed names the calendar a set of entries is written as.
type Feed struct {
	// Name is the calendar's display name (X-WR-CALNAME); left out when empty.
	Name string
	// ProdID identifies the program that wrote the feed (PRODID), for example
	// "-//beamledger//bookings//EN".
	ProdID string
	// Host makes event UIDs globally unique: "<booking id>@<host>", for
	// example "beamledger.example".
	Host string
}

// Write renders a VCALENDAR (VERSION:2.0, PRODID, CALSCALE:GREGORIAN,
// METHOD:PUBLISH, X-WR-CALNAME) with one VEVENT per entry, in the order given.
//
// Each VEVENT carries exactly one UID, "<booking id>@<host>", stable across
// changes so a subscriber updates the event in place; DTSTAMP and
// LAST-MODIFIED, both the booking's UpdatedAt (with METHOD present, RFC 5545
// §3.8.7.2 makes DTSTAMP the time the event's text was made, and it is made
// anew only when the booking changes; reading no clock keeps the same bookings
// rendering to the same bytes); DTSTART and DTEND in UTC; SUMMARY; DESCRIPTION and
// LOCATION (the instrument's name) when not empty; STATUS, CONFIRMED or
// CANCELLED; SEQUENCE, the whole seconds from CreatedAt to UpdatedAt, so it
// grows with every change a second or more after the last; and CATEGORIES,
// the booking kind.
//
// Lines end in CRLF and are folded at 75 octets without splitting a UTF-8
// sequence. A feed with no entries still holds one component, a UTC time
// zone, because RFC 5545 §3.6 requires at least one.
//
// Write returns an error wrapping ErrInvalid, having written nothing, when the
// feed lacks ProdID or Host or an entry has no ID, no UpdatedAt, an empty or
// reversed range, or the same ID as an earlier entry.
func Write(w io.Writer, f Feed, entries []Entry) error {
	cal, err := build(f, entries)
	if err != nil {
		return err
	}
	// The library ignores some write errors; bufio.Writer keeps the first one
	// and reports it from Flush.
	bw := bufio.NewWriter(w)
	if err := cal.SerializeTo(bw, ics.WithNewLineWindows); err != nil {
		return fmt.Errorf("calendar: writing feed: %w", err)
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("calendar: writing feed: %w", err)
	}
	return nil
}

func build(f Feed, entries []Entry) (*ics.Calendar, error) {
	if strings.TrimSpace(f.ProdID) == "" {
		return nil, fmt.Errorf("%w: no product identifier", ErrInvalid)
	}
	if strings.TrimSpace(f.Host) == "" {
		return nil, fmt.Errorf("%w: no host for event identifiers", ErrInvalid)
	}
	cal := ics.NewCalendar() // sets VERSION:2.0
	cal.SetProductId(text(f.ProdID))
	cal.SetCalscale("GREGORIAN")
	cal.SetMethod(ics.MethodPublish)
	if f.Name != "" {
		cal.SetXWRCalName(text(f.Name))
	}
	seen := make(map[string]bool, len(entries))
	for i, e := range entries {
		if err := validate(e.Booking); err != nil {
			return nil, fmt.Errorf("%w: entry %d: %v", ErrInvalid, i, err)
		}
		if seen[e.Booking.ID] {
			return nil, fmt.Errorf("%w: entry %d: booking %q appears twice", ErrInvalid, i, e.Booking.ID)
		}
		seen[e.Booking.ID] = true
		cal.AddVEvent(event(f.Host, e))
	}
	if len(entries) == 0 {
		cal.AddVTimezone(utcZone())
	}
	return cal, nil
}

func validate(b scheduling.Booking) error {
	switch {
	case strings.TrimSpace(b.ID) == "":
		return errors.New("booking has no ID")
	case !representable(b.Start) || !representable(b.End):
		return fmt.Errorf("booking %q has no start or end", b.ID)
	case !b.Start.Before(b.End):
		return fmt.Errorf("booking %q ends before it starts", b.ID)
	case !representable(b.UpdatedAt):
		return fmt.Errorf("booking %q has no update time", b.ID)
	}
	return nil
}

// representable reports whether t is set and fits the four-digit year of an
// RFC 5545 DATE-TIME.
func representable(t time.Time) bool {
	y := t.UTC().Year()
	return !t.IsZero() && y >= 1 && y <= 9999
}

func event(host string, e Entry) *ics.VEvent {
	b := e.Booking
	ev := ics.NewEvent(text(b.ID + "@" + host))
	ev.SetDtStampTime(b.UpdatedAt) // the library formats every instant in UTC
	ev.SetStartAt(b.Start)
	ev.SetEndAt(b.End)
	ev.SetSummary(text(e.Summary))
	if e.Description != "" {
		ev.SetDescription(text(e.Description))
	}
	if e.InstrumentName != "" {
		ev.SetLocation(text(e.InstrumentName))
	}
	status := ics.ObjectStatusConfirmed
	if b.Status == scheduling.StatusCancelled {
		status = ics.ObjectStatusCancelled
	}
	ev.SetStatus(status)
	ev.SetSequence(sequence(b))
	ev.SetLastModifiedAt(b.UpdatedAt)
	ev.AddCategory(text(string(b.Kind)))
	return ev
}

// sequence is the SEQUENCE of a booking's event: whole seconds from CreatedAt
// to UpdatedAt. Bookings keep no revision counter, and a subscriber only
// replaces its copy of an event when SEQUENCE grows (RFC 5545 §3.8.7.4), so it
// is derived from UpdatedAt, which every change advances: 0 for a booking never
// changed, larger after each change made at least a second after the last. It
// is clamped to 0 when UpdatedAt precedes CreatedAt and to the largest INTEGER
// of RFC 5545 §3.3.8.
func sequence(b scheduling.Booking) int {
	if b.CreatedAt.IsZero() || !b.UpdatedAt.After(b.CreatedAt) {
		return 0
	}
	return int(min(b.UpdatedAt.Unix()-b.CreatedAt.Unix(), math.MaxInt32))
}

// text cleans s for the library's TEXT escaping, which handles backslash,
// semicolon, comma and line feed (RFC 5545 §3.3.11) but nothing else: a
// carriage return or other control character would reach the output raw,
// where TEXT allows none but HTAB, and invalid UTF-8 would confuse its
// folding. Line breaks in any convention become one line feed and other
// control characters are dropped; strings.Map, reading s as range does, turns
// each invalid byte into U+FFFD.
func text(s string) string {
	s = strings.ReplaceAll(s, "\r\n", "\n")
	s = strings.ReplaceAll(s, "\r", "\n")
	return strings.Map(func(r rune) rune {
		if r == '\n' || r == '\t' {
			return r
		}
		if r < 0x20 || r == 0x7f {
			return -1
		}
		return r
	}, s)
}

// utcZone is the component an empty feed carries: a VTIMEZONE for UTC, which
// no event refers to and calendar programs ignore.
func utcZone() *ics.VTimezone {
	tz := ics.NewTimezone("UTC")
	std := tz.AddStandard()
	std.AddProperty(ics.ComponentPropertyDtStart, "19700101T000000")
	std.AddProperty(ics.ComponentProperty(ics.PropertyTzoffsetfrom), "+0000")
	std.AddProperty(ics.ComponentProperty(ics.PropertyTzoffsetto), "+0000")
	std.AddProperty(ics.ComponentProperty(ics.PropertyTzname), "UTC")
	return tz
}
