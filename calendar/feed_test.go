package calendar

import (
	"bytes"
	"errors"
	"flag"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"
	"unicode/utf8"

	ical "github.com/emersion/go-ical"

	"beamledger/scheduling"
)

var update = flag.Bool("update", false, "rewrite testdata/feed.ics from the current output")

var testFeed = Feed{
	Name:   "TEM 2; bookings, week 11",
	ProdID: "-//beamledger//bookings//EN",
	Host:   "beamledger.example",
}

// longMultibyte has no spaces, so the library cannot fold at a word boundary,
// and mixes 2- and 4-octet characters so that a fold at a fixed octet count
// lands inside one.
var longMultibyte = strings.Repeat("Åµ🔬", 20)

// fixtures are [constructed] bookings covering every kind of text the feed must
// carry: TEXT specials, line breaks in each convention, control characters,
// invalid UTF-8, long multi-byte text, a non-UTC zone and a cancellation.
func fixtures(t testing.TB) []Entry {
	t.Helper()
	zurich, err := time.LoadLocation("Europe/Zurich")
	if err != nil {
		t.Fatal(err)
	}
	day := func(d, h, m int) time.Time { return time.Date(2025, time.March, d, h, m, 0, 0, time.UTC) }
	cancelledAt := day(9, 8, 0)
	return []Entry{{
		Booking: scheduling.Booking{
			ID: "3f1c2a9e-0001", InstrumentID: "tem-2", ProjectID: "p-7", UserID: "u-1",
			Kind: scheduling.KindIndependent, Status: scheduling.StatusActive,
			Start: day(10, 9, 0), End: day(10, 12, 0),
			CreatedAt: day(1, 10, 0), UpdatedAt: day(1, 10, 0),
			Note: "private note, never in a feed",
		},
		InstrumentName: "TEM 2, room B14",
		Summary:        `Grid 3, sample A; buffer C:\data\x`,
		Description:    "Line one\nLine two, with comma; semicolon \\ backslash\nand \"quotes\": colon",
	}, {
		Booking: scheduling.Booking{
			ID: "3f1c2a9e-0002", InstrumentID: "stem-1", ProjectID: "p-7", UserID: "u-2", StaffID: "s-1",
			Kind: scheduling.KindAssisted, Status: scheduling.StatusActive,
			// Given in the facility's zone: 14:00 CET is 13:00 UTC.
			Start:     time.Date(2025, time.March, 11, 14, 0, 0, 0, zurich),
			End:       time.Date(2025, time.March, 11, 17, 30, 0, 0, zurich),
			CreatedAt: day(2, 9, 0), UpdatedAt: day(2, 9, 0).Add(90 * time.Minute),
		},
		InstrumentName: "Cryo-STEM, bay 4",
		Summary:        "Booked",
		Description:    "windows\r\nline\rbreaks\x07 and a bell",
	}, {
		Booking: scheduling.Booking{
			ID: "3f1c2a9e-0003", InstrumentID: "tem-2", UserID: "u-9",
			Kind: scheduling.KindService, Status: scheduling.StatusCancelled,
			Start: day(12, 7, 0), End: day(12, 19, 0),
			CancelledAt: &cancelledAt, CancelledBy: "u-9", CancelReason: "part late",
			CreatedAt: day(3, 12, 0), UpdatedAt: cancelledAt,
		},
		InstrumentName: "TEM 2, room B14",
		Summary:        "Bake-out",
	}, {
		Booking: scheduling.Booking{
			ID: "3f1c2a9e-0004", InstrumentID: "tem-2", ProjectID: "p-8", UserID: "u-3",
			Kind: scheduling.KindUnattended, Status: scheduling.StatusActive,
			Start: day(12, 19, 0), End: day(13, 7, 0),
			CreatedAt: day(4, 12, 0), UpdatedAt: day(4, 12, 0),
		},
		InstrumentName: "TEM 2, room B14",
		Summary:        longMultibyte,
		Description:    "bad byte \xff" + strings.Repeat("🔬", 30),
	}}
}

func render(t testing.TB, f Feed, entries []Entry) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := Write(&buf, f, entries); err != nil {
		t.Fatalf("Write: %v", err)
	}
	return buf.Bytes()
}

// decode parses a feed with an independent iCalendar implementation and runs
// that implementation's encoder checks (one PRODID and VERSION, one UID and
// DTSTAMP per event, at least one component) on the result.
func decode(t *testing.T, data []byte) *ical.Calendar {
	t.Helper()
	cal, err := ical.NewDecoder(bytes.NewReader(data)).Decode()
	if err != nil {
		t.Fatalf("independent parser rejects the feed: %v", err)
	}
	if err := ical.NewEncoder(io.Discard).Encode(cal); err != nil {
		t.Fatalf("independent encoder finds the feed invalid: %v", err)
	}
	return cal
}

func propText(t *testing.T, c *ical.Component, name string) string {
	t.Helper()
	s, err := c.Props.Text(name)
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	return s
}

func propTime(t *testing.T, c *ical.Component, name string) time.Time {
	t.Helper()
	v, err := c.Props.DateTime(name, nil)
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	return v
}

func TestWriteParsesBack(t *testing.T) {
	entries := fixtures(t)
	cal := decode(t, render(t, testFeed, entries))
	if got := propText(t, cal.Component, "X-WR-CALNAME"); got != testFeed.Name {
		t.Errorf("X-WR-CALNAME = %q, want %q", got, testFeed.Name) // [published: RFC 5545 §3.3.11] ";" and "," round-trip
	}
	events := cal.Events()
	if len(events) != len(entries) {
		t.Fatalf("%d events, want %d", len(events), len(entries))
	}
	for i, e := range entries {
		ev, b := events[i].Component, e.Booking
		t.Run(b.ID, func(t *testing.T) {
			if got, want := propText(t, ev, ical.PropUID), b.ID+"@"+testFeed.Host; got != want {
				t.Errorf("UID = %q, want %q", got, want) // [constructed] our UID rule
			}
			// [published: RFC 5545 §3.3.5 form #2] a "Z" date-time is an instant in UTC.
			if got := propTime(t, ev, ical.PropDateTimeStart); !got.Equal(b.Start) {
				t.Errorf("DTSTART = %v, want %v", got, b.Start.UTC())
			}
			if got := propTime(t, ev, ical.PropDateTimeEnd); !got.Equal(b.End) {
				t.Errorf("DTEND = %v, want %v", got, b.End.UTC())
			}
			if got := propTime(t, ev, ical.PropDateTimeStamp); !got.Equal(b.UpdatedAt) {
				t.Errorf("DTSTAMP = %v, want %v", got, b.UpdatedAt)
			}
			if got := propTime(t, ev, ical.PropLastModified); !got.Equal(b.UpdatedAt) {
				t.Errorf("LAST-MODIFIED = %v, want %v", got, b.UpdatedAt)
			}
			// [published: RFC 5545 §3.3.11] backslash, ";", "," and line breaks
			// survive escaping; control characters other than HTAB are not TEXT.
			if got, want := propText(t, ev, ical.PropSummary), cleaned(e.Summary); got != want {
				t.Errorf("SUMMARY = %q, want %q", got, want)
			}
			if got, want := propText(t, ev, ical.PropDescription), cleaned(e.Description); got != want {
				t.Errorf("DESCRIPTION = %q, want %q", got, want)
			}
			if got := propText(t, ev, ical.PropLocation); got != e.InstrumentName {
				t.Errorf("LOCATION = %q, want %q", got, e.InstrumentName)
			}
			if got := propText(t, ev, ical.PropCategories); got != string(b.Kind) {
				t.Errorf("CATEGORIES = %q, want %q", got, b.Kind)
			}
			want := "CONFIRMED" // [published: RFC 5545 §3.8.1.11] VEVENT status values
			if b.Status == scheduling.StatusCancelled {
				want = "CANCELLED"
			}
			if got := propText(t, ev, ical.PropStatus); got != want {
				t.Errorf("STATUS = %q, want %q", got, want)
			}
		})
	}
}

// readBack is what a subscriber should read for the fixtures' texts that
// need cleaning, written out by hand rather than computed by text, so that a
// fault in text shows here. Other texts read back unchanged.
var readBack = map[string]string{
	"windows\r\nline\rbreaks\x07 and a bell":  "windows\nline\nbreaks and a bell",
	"bad byte \xff" + strings.Repeat("🔬", 30): "bad byte \uFFFD" + strings.Repeat("🔬", 30),
}

func cleaned(s string) string {
	if v, ok := readBack[s]; ok {
		return v
	}
	return s
}

func TestWriteNoteStaysPrivate(t *testing.T) {
	out := render(t, testFeed, fixtures(t))
	for _, private := range []string{"private note", "part late"} {
		if bytes.Contains(out, []byte(private)) {
			t.Errorf("feed contains %q, which only the caller may choose to show", private)
		}
	}
}

// physicalLines splits a feed at CRLF, failing on a missing final CRLF.
func physicalLines(t *testing.T, out []byte) []string {
	t.Helper()
	s := string(out)
	if !strings.HasSuffix(s, "\r\n") {
		t.Fatalf("feed does not end with CRLF") // [published: RFC 5545 §3.1] contentline ends in CRLF
	}
	return strings.Split(strings.TrimSuffix(s, "\r\n"), "\r\n")
}

// unfold joins folded lines: a line starting with one space or tab continues
// the one before, minus that character.
func unfold(lines []string) []string {
	var out []string
	for _, l := range lines {
		if len(out) > 0 && (strings.HasPrefix(l, " ") || strings.HasPrefix(l, "\t")) {
			out[len(out)-1] += l[1:]
			continue
		}
		out = append(out, l)
	}
	return out
}

func TestWriteBytes(t *testing.T) {
	out := render(t, testFeed, fixtures(t))
	lines := physicalLines(t, out)
	for i, l := range lines {
		if strings.ContainsAny(l, "\r\n") {
			t.Errorf("line %d %q has a bare CR or LF", i+1, l) // [published: RFC 5545 §3.1] every line ends with CRLF
		}
		if len(l) > 75 {
			t.Errorf("line %d is %d octets: %q", i+1, len(l), l) // [published: RFC 5545 §3.1] at most 75 octets excluding CRLF
		}
		if !utf8.ValidString(l) {
			t.Errorf("line %d %q is not valid UTF-8", i+1, l) // [published: RFC 5545 §3.1] fold only between two characters
		}
	}
	props := unfold(lines)
	if n := count(props, "VERSION:2.0"); n != 1 {
		t.Errorf("%d VERSION:2.0 lines, want 1", n) // [published: RFC 5545 §3.7.4]
	}
	if n := countPrefix(props, "PRODID:"); n != 1 {
		t.Errorf("%d PRODID lines, want 1", n) // [published: RFC 5545 §3.7.3]
	}
	events := vevents(props)
	if len(events) != len(fixtures(t)) {
		t.Fatalf("%d VEVENTs, want %d", len(events), len(fixtures(t)))
	}
	utc := regexp.MustCompile(`^[0-9]{8}T[0-9]{6}Z$`)
	for i, ev := range events {
		if n := countPrefix(ev, "UID:"); n != 1 {
			t.Errorf("VEVENT %d has %d UIDs, want 1", i, n) // [published: RFC 5545 §3.6.1] UID required, once
		}
		if n := countPrefix(ev, "DTSTAMP:"); n != 1 {
			t.Errorf("VEVENT %d has %d DTSTAMPs, want 1", i, n) // [published: RFC 5545 §3.6.1] DTSTAMP required, once
		}
		for _, name := range []string{"DTSTAMP", "DTSTART", "DTEND", "LAST-MODIFIED"} {
			if v := value(ev, name); !utc.MatchString(v) {
				t.Errorf("VEVENT %d %s:%s is not a UTC date-time", i, name, v) // [published: RFC 5545 §3.8.7.2, §3.3.5 form #2]
			}
		}
	}
	// The long multi-byte SUMMARY must really fold, or the checks above prove nothing.
	if i := indexPrefix(lines, "SUMMARY:Åµ"); i < 0 || !strings.HasPrefix(lines[i+1], " ") {
		t.Errorf("the long SUMMARY is not folded")
	}
}

func vevents(props []string) [][]string {
	var events [][]string
	for i, p := range props {
		if p == "BEGIN:VEVENT" {
			j := i + index(props[i:], "END:VEVENT")
			events = append(events, props[i+1:j])
		}
	}
	return events
}

func count(lines []string, s string) (n int) {
	for _, l := range lines {
		if l == s {
			n++
		}
	}
	return n
}

func countPrefix(lines []string, p string) (n int) {
	for _, l := range lines {
		if strings.HasPrefix(l, p) {
			n++
		}
	}
	return n
}

func index(lines []string, s string) int {
	for i, l := range lines {
		if l == s {
			return i
		}
	}
	return -1
}

func indexPrefix(lines []string, p string) int {
	for i, l := range lines {
		if strings.HasPrefix(l, p) {
			return i
		}
	}
	return -1
}

func value(props []string, name string) string {
	if i := indexPrefix(props, name+":"); i >= 0 {
		return strings.TrimPrefix(props[i], name+":")
	}
	return ""
}

func TestWriteGolden(t *testing.T) {
	out := render(t, testFeed, fixtures(t))
	path := filepath.Join("testdata", "feed.ics")
	if *update {
		if err := os.WriteFile(path, out, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if !bytes.Equal(out, want) {
		t.Errorf("output differs from %s (go test -update to accept):\n%s", path, out)
	}
}

func TestWriteEmpty(t *testing.T) {
	out := render(t, testFeed, nil)
	for i, l := range physicalLines(t, out) {
		if strings.ContainsAny(l, "\r\n") {
			t.Errorf("line %d %q has a bare CR or LF", i+1, l) // [published: RFC 5545 §3.1]
		}
	}
	// [published: RFC 5545 §3.6] the body holds one or more components:
	// decode runs an encoder check that refuses an empty VCALENDAR.
	cal := decode(t, out)
	if n := len(cal.Events()); n != 0 {
		t.Errorf("%d events in an empty feed", n)
	}
	if v := cal.Props.Get(ical.PropVersion); v == nil || v.Value != "2.0" {
		t.Errorf("VERSION = %v, want 2.0", v) // [published: RFC 5545 §3.7.4]
	}
	if got := propText(t, cal.Component, ical.PropProductID); got != testFeed.ProdID {
		t.Errorf("PRODID = %q, want %q", got, testFeed.ProdID) // [published: RFC 5545 §3.7.3]
	}
}

func TestWriteSequence(t *testing.T) {
	created := time.Date(2025, time.March, 1, 10, 0, 0, 0, time.UTC)
	seq := func(updated time.Time) int {
		e := fixtures(t)[0]
		e.Booking.CreatedAt, e.Booking.UpdatedAt = created, updated
		ev := decode(t, render(t, testFeed, []Entry{e})).Events()[0]
		n, err := ev.Props.Get(ical.PropSequence).Int()
		if err != nil {
			t.Fatal(err)
		}
		return n
	}
	tests := []struct {
		name    string
		updated time.Time
		want    int
	}{
		{"never changed", created, 0},
		{"changed 90 s later", created.Add(90 * time.Second), 90},
		{"changed a day later", created.Add(24 * time.Hour), 86400},
		{"clock behind creation", created.Add(-time.Hour), 0},
		{"past INTEGER range", created.AddDate(100, 0, 0), 2147483647}, // [published: RFC 5545 §3.3.8] INTEGER maximum
	}
	for _, tt := range tests {
		if got := seq(tt.updated); got != tt.want {
			t.Errorf("%s: SEQUENCE = %d, want %d", tt.name, got, tt.want) // [constructed] seconds since creation
		}
	}
}

func TestWriteRejects(t *testing.T) {
	good := fixtures(t)[0]
	with := func(edit func(*Entry)) []Entry {
		e := good
		edit(&e)
		return []Entry{e}
	}
	tests := []struct {
		name    string
		feed    Feed
		entries []Entry
	}{
		{"no prodid", Feed{Host: "h"}, []Entry{good}},
		{"no host", Feed{ProdID: "p"}, []Entry{good}},
		{"no booking id", testFeed, with(func(e *Entry) { e.Booking.ID = "" })},
		{"no start", testFeed, with(func(e *Entry) { e.Booking.Start = time.Time{} })},
		{"empty range", testFeed, with(func(e *Entry) { e.Booking.End = e.Booking.Start })},
		{"reversed range", testFeed, with(func(e *Entry) { e.Booking.End = e.Booking.Start.Add(-time.Hour) })},
		{"no update time", testFeed, with(func(e *Entry) { e.Booking.UpdatedAt = time.Time{} })},
		{"five-digit year", testFeed, with(func(e *Entry) { e.Booking.End = time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC) })},
		{"same booking twice", testFeed, []Entry{good, good}},
	}
	for _, tt := range tests {
		var buf bytes.Buffer
		err := Write(&buf, tt.feed, tt.entries)
		if !errors.Is(err, ErrInvalid) {
			t.Errorf("%s: err = %v, want ErrInvalid", tt.name, err)
		}
		if buf.Len() != 0 {
			t.Errorf("%s: wrote %d bytes before failing", tt.name, buf.Len())
		}
	}
}

type failingWriter struct{}

func (failingWriter) Write([]byte) (int, error) { return 0, errors.New("disk full") }

func TestWriteReportsWriteError(t *testing.T) {
	if err := Write(failingWriter{}, testFeed, fixtures(t)); err == nil {
		t.Error("Write to a failing writer returned nil")
	}
}

// FuzzWrite checks, for any SUMMARY, the line rules of RFC 5545 §3.1 and that
// the independent parser reads back the cleaned text.
func FuzzWrite(f *testing.F) {
	for _, s := range []string{"", longMultibyte, `a\,b;c\\d` + "\n", "x\xff" + strings.Repeat("🔬", 40),
		strings.Repeat("é ", 60), "\r\r\n\x00\t", strings.Repeat("<a>", 40)} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, summary string) {
		e := fixtures(t)[0]
		e.Summary = summary
		out := render(t, testFeed, []Entry{e})
		for i, l := range physicalLines(t, out) {
			// [published: RFC 5545 §3.1] CRLF line ends, at most 75 octets, folds between characters.
			if strings.ContainsAny(l, "\r\n") || len(l) > 75 || !utf8.ValidString(l) {
				t.Fatalf("line %d breaks RFC 5545 §3.1: %q", i+1, l)
			}
		}
		ev := decode(t, out).Events()[0]
		if got, want := propText(t, ev.Component, ical.PropSummary), text(summary); got != want {
			t.Fatalf("SUMMARY read back as %s, want %s", strconv.Quote(got), strconv.Quote(want)) // [published: RFC 5545 §3.3.11]
		}
	})
}
