// Package statementpdf writes a statement of charges as a PDF for filing and mail:
// the same lines, totals and accounts as the printable page and the CSV, on A4
// landscape pages with the statement's identity on every page, including the SHA-256
// of its state as its ledger event holds it, so that a paper copy can be matched to
// the ledger. It wraps
// github.com/signintech/gopdf and embeds the Go fonts (golang.org/x/image/font/gofont,
// BSD licence), so the file shows the same wherever it is opened.
package statementpdf

import (
	"encoding/hex"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"github.com/signintech/gopdf"
	"golang.org/x/image/font/gofont/gobold"
	"golang.org/x/image/font/gofont/goregular"

	"beamledger/provenance"
	"beamledger/scheduling"
)

// Meta is what the record does not say but the paper copy should.
type Meta struct {
	Facility     string
	ProjectCode  string
	ProjectTitle string
	Generated    time.Time // when this copy was made
}

// Page geometry, in points: A4 landscape with 36 pt (half an inch) margins.
const (
	pageW, pageH = 842.0, 595.0
	margin       = 36.0
	rowH         = 13.0
	headTop      = margin
	tableTop     = margin + 58
	footY        = pageH - margin + 8
	fontSize     = 8.0
)

// LinesPerPage is how many statement lines one page holds: the rows between the
// column headings and the footer, less a row's room above the footer.
const LinesPerPage = 34

// column is one table column: its heading, width and alignment.
type column struct {
	head  string
	width float64
	right bool
}

var columns = []column{
	{"#", 22, true}, {"Booking / reason", 160, false}, {"Component", 78, false}, {"Rule", 114, false},
	{"From (UTC)", 72, false}, {"To (UTC)", 72, false}, {"Min", 34, true}, {"Rate/h", 50, true},
	{"Amount", 58, true}, {"Accounts", 110, false},
}

// Pages is how many pages Write makes for rec: its lines, LinesPerPage to a page, then
// the totals by component and by account, which start a page of their own when they
// do not fit under the last line.
func Pages(rec scheduling.StatementRecord) int {
	pages := max(1, (len(rec.Lines)+LinesPerPage-1)/LinesPerPage)
	if totalsOwnPage(rec, pages) {
		pages++
	}
	return pages
}

// totalsOwnPage says whether the totals go on a page after the lines' last.
func totalsOwnPage(rec scheduling.StatementRecord, linePages int) bool {
	onLast := len(rec.Lines) - (linePages-1)*LinesPerPage
	totals := 2 + len(rec.ComponentTotals) + len(rec.AccountTotals) // a gap, the total, the parts
	return len(rec.Lines) > 0 && onLast+totals > LinesPerPage
}

// Write renders rec to w. Text too wide for its column is shortened with "…"; the CSV
// and JSON forms hold every character. Accounts are numbered in the order of the
// statement's account totals, listed in full at the end.
func Write(w io.Writer, rec scheduling.StatementRecord, meta Meta) error {
	pdf := &gopdf.GoPdf{}
	pdf.Start(gopdf.Config{PageSize: gopdf.Rect{W: pageW, H: pageH}, Unit: gopdf.UnitPT})
	pdf.SetInfo(gopdf.PdfInfo{Title: "Statement " + rec.ID, Subject: "Statement of charges, project " + meta.ProjectCode,
		Creator: "beamledger", Producer: "beamledger", CreationDate: meta.Generated})
	if err := pdf.AddTTFFontData("regular", goregular.TTF); err != nil {
		return err
	}
	if err := pdf.AddTTFFontData("bold", gobold.TTF); err != nil {
		return err
	}
	digest, err := provenance.StateDigest(rec)
	if err != nil {
		return err
	}
	p := printer{pdf: pdf, rec: rec, meta: meta, pages: Pages(rec), digest: hex.EncodeToString(digest[:])}
	accountNo := map[string]int{}
	for i, a := range rec.AccountTotals {
		accountNo[a.AccountID] = i + 1
	}
	p.newPage()
	for i, l := range rec.Lines {
		if i > 0 && i%LinesPerPage == 0 {
			p.newPage()
		}
		var who string
		switch {
		case l.BookingID != "" && l.Reason != "":
			who = l.BookingID + " · " + l.Reason
		case l.BookingID != "":
			who = l.BookingID
		default:
			who = l.Reason
		}
		var accounts []string
		for _, a := range l.Allocations {
			accounts = append(accounts, fmt.Sprintf("#%d %s", accountNo[a.AccountID], scheduling.FormatMinor(a.AmountMinor, rec.Currency)))
		}
		p.row("regular", strconv.Itoa(l.LineNo), who, string(l.Component), string(l.Rule), instant(l.From), instant(l.To),
			strconv.Itoa(l.Minutes), scheduling.FormatMinor(l.HourlyRateMinor, rec.Currency),
			scheduling.FormatMinor(l.AmountMinor, rec.Currency), strings.Join(accounts, ", "))
	}
	if totalsOwnPage(rec, p.page) {
		p.newPage()
	}
	p.y += rowH / 2
	p.row("bold", "", "Total", "", "", "", "", "", "", scheduling.FormatMinor(rec.TotalMinor, rec.Currency), "")
	for _, c := range rec.ComponentTotals {
		p.row("regular", "", "  "+string(c.Component), "", "", "", "", "", "", scheduling.FormatMinor(c.AmountMinor, rec.Currency), "")
	}
	for i, a := range rec.AccountTotals {
		p.row("regular", "", fmt.Sprintf("  account #%d: %s", i+1, a.AccountID), "", "", "", "", "", "",
			scheduling.FormatMinor(a.AmountMinor, rec.Currency), "")
	}
	if p.err != nil {
		return p.err
	}
	_, err = pdf.WriteTo(w)
	return err
}

// printer lays rows out page by page, keeping the first error.
type printer struct {
	pdf   *gopdf.GoPdf
	rec   scheduling.StatementRecord
	meta  Meta
	page  int
	pages int
	y     float64
	err   error
	// digest is the SHA-256 of the record's canonical JSON, which is the state of the
	// ledger event holding this statement as it stands.
	digest string
}

// newPage starts a page with the statement's identity, the column headings and the
// page number.
func (p *printer) newPage() {
	p.pdf.AddPage()
	p.page++
	rec := p.rec
	p.text("bold", 13, margin, headTop, "Statement of charges")
	status := string(rec.Status)
	if rec.IssuedAt != nil {
		status += " " + rec.IssuedAt.UTC().Format("2006-01-02 15:04 UTC")
	}
	p.text("regular", 9, margin, headTop+18, fmt.Sprintf("%s · project %s %s · period %s to %s (end exclusive) · %s · amounts in %s",
		p.meta.Facility, p.meta.ProjectCode, p.meta.ProjectTitle, rec.PeriodStart.UTC().Format(time.DateOnly),
		rec.PeriodEnd.UTC().Format(time.DateOnly), status, rec.Currency))
	p.text("regular", 9, margin, headTop+31, "Statement "+rec.ID+" · ledger state SHA-256 "+p.digest)
	p.y = tableTop
	heads := make([]string, len(columns))
	for i, c := range columns {
		heads[i] = c.head
	}
	p.row("bold", heads...)
	p.pdf.SetLineWidth(0.5)
	p.pdf.Line(margin, p.y, pageW-margin, p.y)
	p.text("regular", 7, margin, footY, fmt.Sprintf("Statement %s · page %d of %d · made %s by beamledger", rec.ID, p.page, p.pages,
		p.meta.Generated.UTC().Format("2006-01-02 15:04 UTC")))
}

// row writes one table row at the current height and moves down.
func (p *printer) row(font string, cells ...string) {
	if p.err == nil {
		p.err = p.pdf.SetFont(font, "", fontSize)
	}
	x := margin
	for i, c := range columns {
		text := p.fit(cells[i], c.width-4)
		opt := gopdf.CellOption{Align: gopdf.Left | gopdf.Middle}
		if c.right {
			opt.Align = gopdf.Right | gopdf.Middle
		}
		p.pdf.SetXY(x+2, p.y)
		if p.err == nil {
			p.err = p.pdf.CellWithOption(&gopdf.Rect{W: c.width - 4, H: rowH}, text, opt)
		}
		x += c.width
	}
	p.y += rowH
}

// fit shortens s with "…" until it is at most width points wide in the current font.
func (p *printer) fit(s string, width float64) string {
	if w, err := p.pdf.MeasureTextWidth(s); err != nil || w <= width {
		return s
	}
	r := []rune(s)
	for len(r) > 0 {
		r = r[:len(r)-1]
		if w, err := p.pdf.MeasureTextWidth(string(r) + "…"); err == nil && w <= width {
			break
		}
	}
	return string(r) + "…"
}

func (p *printer) text(font string, size, x, y float64, s string) {
	if p.err == nil {
		p.err = p.pdf.SetFont(font, "", size)
	}
	p.pdf.SetXY(x, y)
	if p.err == nil {
		p.err = p.pdf.Text(p.fit(s, pageW-2*margin))
	}
}

func instant(t *time.Time) string {
	if t == nil {
		return ""
	}
	return t.UTC().Format("2006-01-02 15:04")
}
