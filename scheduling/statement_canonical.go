package scheduling

import (
	"errors"
	"slices"
	"strconv"
	"time"
	"unicode/utf8"
)

// A statement's ledger event holds its whole record, every line included, in RFC 8785
// canonical JSON. A month's statements for a facility hold tens of thousands of lines,
// and encoding them the general way (encoding/json by reflection, then parsing and
// re-writing the result into canonical form) cost more than pricing them. The record
// therefore writes its own canonical form: members in RFC 8785 order (the keys are
// ASCII, so code-unit order is byte order), strings escaped as RFC 8785 §3.2.2.2 says,
// integers as the decimal digits ECMAScript prints. Anything outside what that covers
// exactly (an integer beyond 2^53, a string that is not UTF-8, a year JSON time cannot
// write) is reported, and the caller falls back to the general way. A test holds the
// output to the general way's byte for byte.

// errNotCanonical says the fast writer does not cover a value; the general one will.
var errNotCanonical = errors.New("statement record: value outside the canonical writer's range")

// AppendCanonicalJSON appends the record's RFC 8785 canonical JSON to dst, the bytes
// the general way (encoding/json, then RFC 8785 canonicalization) gives. It returns an
// error, and dst unchanged in meaning, for values it does not cover.
func (r StatementRecord) AppendCanonicalJSON(dst []byte) ([]byte, error) {
	// A line is about 450 bytes written: grow once rather than by doubling.
	w := canonWriter{b: slices.Grow(dst, 512+480*len(r.Lines))}
	w.raw(`{"account_totals":`)
	w.allocations(r.AccountTotals)
	w.raw(`,"component_totals":`)
	if r.ComponentTotals == nil {
		w.raw("null")
	} else {
		w.raw("[")
		for i, c := range r.ComponentTotals {
			if i > 0 {
				w.raw(",")
			}
			w.raw(`{"amount_minor":`)
			w.int(c.AmountMinor)
			w.raw(`,"component":`)
			w.str(string(c.Component))
			w.raw("}")
		}
		w.raw("]")
	}
	w.raw(`,"currency":`)
	w.str(r.Currency)
	w.raw(`,"id":`)
	w.str(r.ID)
	if r.IssuedAt != nil {
		w.raw(`,"issued_at":`)
		w.time(*r.IssuedAt)
	}
	w.raw(`,"lines":`)
	if r.Lines == nil {
		w.raw("null")
	} else {
		w.raw("[")
		for i := range r.Lines {
			if i > 0 {
				w.raw(",")
			}
			w.line(&r.Lines[i])
		}
		w.raw("]")
	}
	w.raw(`,"period_end":`)
	w.time(r.PeriodEnd)
	w.raw(`,"period_start":`)
	w.time(r.PeriodStart)
	w.raw(`,"project_id":`)
	w.str(r.ProjectID)
	w.raw(`,"status":`)
	w.str(string(r.Status))
	w.raw(`,"total_minor":`)
	w.int(r.TotalMinor)
	w.raw("}")
	if w.err != nil {
		return dst, w.err
	}
	return w.b, nil
}

// canonWriter appends canonical JSON; the first value it cannot write exactly sets err.
type canonWriter struct {
	b   []byte
	err error
	// The last instant written and its JSON (see time).
	last     time.Time
	lastJSON []byte
	lastOK   bool
}

func (w *canonWriter) raw(s string) { w.b = append(w.b, s...) }

// line writes a statement line's members in RFC 8785 order, leaving out the empty
// ones its JSON tags omit.
func (w *canonWriter) line(l *StatementLine) {
	w.raw("{")
	if l.AdjustmentID != "" {
		w.raw(`"adjustment_id":`)
		w.str(l.AdjustmentID)
		w.raw(",")
	}
	w.raw(`"allocations":`)
	w.allocations(l.Allocations)
	w.raw(`,"amount_minor":`)
	w.int(l.AmountMinor)
	if l.BookingID != "" {
		w.raw(`,"booking_id":`)
		w.str(l.BookingID)
	}
	if l.BookingKind != "" {
		w.raw(`,"booking_kind":`)
		w.str(string(l.BookingKind))
	}
	if l.BookingStart != nil {
		w.raw(`,"booking_start":`)
		w.time(*l.BookingStart)
	}
	w.raw(`,"component":`)
	w.str(string(l.Component))
	if l.CorrectsStatementID != "" {
		w.raw(`,"corrects_statement_id":`)
		w.str(l.CorrectsStatementID)
	}
	if l.From != nil {
		w.raw(`,"from":`)
		w.time(*l.From)
	}
	w.raw(`,"hourly_rate_minor":`)
	w.int(l.HourlyRateMinor)
	if l.InstrumentID != "" {
		w.raw(`,"instrument_id":`)
		w.str(l.InstrumentID)
	}
	w.raw(`,"line_no":`)
	w.int(int64(l.LineNo))
	w.raw(`,"minutes":`)
	w.int(int64(l.Minutes))
	if l.Reason != "" {
		w.raw(`,"reason":`)
		w.str(l.Reason)
	}
	w.raw(`,"rule":`)
	w.str(string(l.Rule))
	if l.To != nil {
		w.raw(`,"to":`)
		w.time(*l.To)
	}
	w.raw("}")
}

func (w *canonWriter) allocations(as []Allocation) {
	if as == nil {
		w.raw("null")
		return
	}
	w.raw("[")
	for i, a := range as {
		if i > 0 {
			w.raw(",")
		}
		w.raw(`{"account_id":`)
		w.str(a.AccountID)
		w.raw(`,"amount_minor":`)
		w.int(a.AmountMinor)
		w.raw("}")
	}
	w.raw("]")
}

// maxExactInt is 2^53: beyond it an ECMAScript number no longer holds every integer,
// and RFC 8785 would write a rounded value.
const maxExactInt = 1 << 53

func (w *canonWriter) int(v int64) {
	if v > maxExactInt || v < -maxExactInt {
		w.err = errNotCanonical
		return
	}
	w.b = strconv.AppendInt(w.b, v, 10)
}

// time writes t as encoding/json does (RFC 3339 with the nanoseconds it has), a JSON
// string needing no escapes. Records hold UTC; another offset is left to the general
// way, which has its own rules for offsets RFC 3339 cannot write.
func (w *canonWriter) time(t time.Time) {
	// A line's booking start and its from are often the same instant, and so are
	// one line's to and the next line's from: the last one written is kept.
	if w.lastOK && t == w.last {
		w.b = append(w.b, w.lastJSON...)
		return
	}
	if _, off := t.Zone(); off != 0 {
		w.err = errNotCanonical
		return
	}
	if y := t.Year(); y < 0 || y > 9999 {
		w.err = errNotCanonical
		return
	}
	start := len(w.b)
	w.b = append(w.b, '"')
	w.b = t.AppendFormat(w.b, time.RFC3339Nano)
	w.b = append(w.b, '"')
	w.last, w.lastJSON, w.lastOK = t, append(w.lastJSON[:0], w.b[start:]...), true
}

// str writes s as RFC 8785 §3.2.2.2 does: '"' and '\' escaped, the control characters
// below U+0020 as \b \t \n \f \r or \u00hh (lower-case hex), everything else as is.
func (w *canonWriter) str(s string) {
	if !utf8.ValidString(s) {
		w.err = errNotCanonical // encoding/json would replace the bad bytes
		return
	}
	const hex = "0123456789abcdef"
	w.b = append(w.b, '"')
	start := 0
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c >= 0x20 && c != '"' && c != '\\' {
			continue
		}
		w.b = append(w.b, s[start:i]...)
		switch c {
		case '"', '\\':
			w.b = append(w.b, '\\', c)
		case '\b':
			w.b = append(w.b, '\\', 'b')
		case '\t':
			w.b = append(w.b, '\\', 't')
		case '\n':
			w.b = append(w.b, '\\', 'n')
		case '\f':
			w.b = append(w.b, '\\', 'f')
		case '\r':
			w.b = append(w.b, '\\', 'r')
		default:
			w.b = append(w.b, '\\', 'u', '0', '0', hex[c>>4], hex[c&0xf])
		}
		start = i + 1
	}
	w.b = append(w.b, s[start:]...)
	w.b = append(w.b, '"')
}
