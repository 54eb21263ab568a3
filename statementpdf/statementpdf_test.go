package statementpdf_test

import (
	"bytes"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/pdfcpu/pdfcpu/pkg/api"
	"github.com/pdfcpu/pdfcpu/pkg/pdfcpu/model"

	"beamledger/scheduling"
	"beamledger/statementpdf"
)

// record is a statement of n one-hour lines at 120.00 split over two accounts.
func record(n int) scheduling.StatementRecord {
	start := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	rec := scheduling.StatementRecord{ID: "0b9e3f7c-2a41-4c55-9d1e-6f0a8b2c4d10", ProjectID: "p-1", Currency: "EUR",
		PeriodStart: start, PeriodEnd: start.AddDate(0, 1, 0), Status: scheduling.StatementDraft}
	for i := range n {
		from, to := start.Add(time.Duration(i)*time.Hour), start.Add(time.Duration(i+1)*time.Hour)
		rec.Lines = append(rec.Lines, scheduling.StatementLine{LineNo: i + 1, BookingID: fmt.Sprintf("b-%04d", i),
			Component: scheduling.ComponentInstrumentTime, Rule: "greater_of_booked_and_used", From: &from, To: &to,
			Minutes: 60, HourlyRateMinor: 12000, AmountMinor: 12000,
			Reason:      strings.Repeat("a reason long enough to be shortened ", i%2),
			Allocations: []scheduling.Allocation{{AccountID: "acct-a", AmountMinor: 6000}, {AccountID: "acct-b", AmountMinor: 6000}}})
	}
	rec.TotalMinor = int64(n) * 12000
	rec.ComponentTotals = []scheduling.ComponentTotal{{Component: scheduling.ComponentInstrumentTime, AmountMinor: rec.TotalMinor}}
	rec.AccountTotals = []scheduling.Allocation{{AccountID: "acct-a", AmountMinor: rec.TotalMinor / 2}, {AccountID: "acct-b", AmountMinor: rec.TotalMinor / 2}}
	return rec
}

// TestStatementPDF writes statements of several lengths and reads each back with an
// independent PDF library (github.com/pdfcpu/pdfcpu), which must find a valid file with
// the pages the layout promises and both fonts embedded.
func TestStatementPDF(t *testing.T) {
	per := statementpdf.LinesPerPage
	for _, c := range []struct {
		lines, pages int
	}{
		{0, 1},         // an empty statement is one page with its zero total
		{1, 1},         // one line and the totals
		{per - 4, 2},   // the totals (a gap, total, 1 component, 2 accounts) no longer fit under the lines
		{per - 5, 1},   // they just fit
		{per, 2},       // a full page of lines: the totals on a page of their own
		{3*per + 1, 4}, // lines over four pages, totals under the last line
	} {
		rec := record(c.lines)
		var buf bytes.Buffer
		if err := statementpdf.Write(&buf, rec, statementpdf.Meta{Facility: "Test facility", ProjectCode: "P-1",
			ProjectTitle: "Grain boundaries", Generated: time.Date(2031, 4, 2, 8, 0, 0, 0, time.UTC)}); err != nil {
			t.Fatal(err)
		}
		if got := statementpdf.Pages(rec); got != c.pages {
			t.Errorf("%d lines: Pages = %d, want %d", c.lines, got, c.pages)
		}
		conf := model.NewDefaultConfiguration()
		conf.ValidationMode = model.ValidationStrict
		ctx, err := api.ReadContext(bytes.NewReader(buf.Bytes()), conf)
		if err != nil {
			t.Fatalf("%d lines: pdfcpu cannot read the file: %v", c.lines, err)
		}
		if err := api.ValidateContext(ctx); err != nil {
			t.Fatalf("%d lines: pdfcpu finds the file invalid: %v", c.lines, err)
		}
		// [computed] pdfcpu's count of the page tree.
		if ctx.PageCount != c.pages {
			t.Errorf("%d lines: %d pages, want %d", c.lines, ctx.PageCount, c.pages)
		}
		info, err := api.PDFInfo(bytes.NewReader(buf.Bytes()), "statement.pdf", nil, true, conf)
		if err != nil {
			t.Fatal(err)
		}
		var embedded int
		for _, f := range info.Fonts {
			if f.Embedded {
				embedded++
			}
		}
		if embedded != 2 {
			t.Errorf("%d lines: %d embedded fonts (%+v), want the regular and the bold Go font", c.lines, embedded, info.Fonts)
		}
	}
}
