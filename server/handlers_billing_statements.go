package server

import (
	"bytes"
	"encoding/hex"
	"fmt"
	"html/template"
	"net/http"
	"strconv"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/provenance"
	"beamledger/scheduling"
	"beamledger/statementpdf"
)

// statementPeriod reads a month ("2026-03") as its bounds in the facility's zone.
func (s *Server) statementPeriod(c echo.Context, month string) (from, to time.Time, err error) {
	t, perr := time.Parse("2006-01", month)
	if perr != nil {
		return from, to, beamledger.InvalidField("month", "must be a calendar month as YYYY-MM")
	}
	loc, err := s.facilityLocation(c.Request().Context())
	if err != nil {
		return from, to, err
	}
	from, to = scheduling.PeriodBounds(scheduling.PeriodMonth, time.Date(t.Year(), t.Month(), 15, 12, 0, 0, 0, loc), loc)
	return from, to, nil
}

func (s *Server) handleStatementList(c echo.Context) error {
	ctx, p, err := s.paramProject(c)
	if err != nil {
		return err
	}
	out, err := s.store.Statements(ctx, p.ID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(out))
}

// handleStatementCompute computes the draft of a project's month from its bookings,
// usage and adjustments: 201 for a new draft, 200 for a recomputed one, 409 when the
// month's statement was issued.
func (s *Server) handleStatementCompute(c echo.Context) error {
	var in struct {
		Month string `json:"month"`
	}
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx, p, err := s.paramProject(c)
	if err != nil {
		return err
	}
	from, to, err := s.statementPeriod(c, in.Month)
	if err != nil {
		return err
	}
	st, created, err := s.store.ComputeStatement(ctx, p.ID, from, to, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	if created {
		return c.JSON(http.StatusCreated, st)
	}
	return c.JSON(http.StatusOK, st)
}

// visibleStatement loads a statement of a project the caller may read.
func (s *Server) visibleStatement(c echo.Context) (scheduling.Statement, error) {
	ctx := c.Request().Context()
	st, err := s.store.Statement(ctx, c.Param("statement_id"))
	if err != nil {
		return st, err
	}
	if _, err := s.visibleProject(ctx, st.Record().ProjectID); err != nil {
		return scheduling.Statement{}, beamledger.NotFound("statement")
	}
	return st, nil
}

// handleStatementGet answers a statement as JSON, as CSV for finance systems
// (format=csv, columns of scheduling.StatementCSVColumns), as a printable page
// (format=html) or as a PDF (format=pdf).
func (s *Server) handleStatementGet(c echo.Context) error {
	st, err := s.visibleStatement(c)
	if err != nil {
		return err
	}
	switch c.QueryParam("format") {
	case "", "json":
		return c.JSON(http.StatusOK, st)
	case "csv":
		var buf bytes.Buffer
		if err := scheduling.WriteStatementCSV(&buf, st); err != nil {
			return err
		}
		rec := st.Record()
		c.Response().Header().Set("Content-Disposition", fmt.Sprintf(`attachment; filename="statement-%s.csv"`, rec.ID))
		return c.Blob(http.StatusOK, "text/csv; charset=utf-8", buf.Bytes())
	case "html":
		return s.renderStatementHTML(c, st)
	case "pdf":
		return s.renderStatementPDF(c, st)
	}
	return beamledger.InvalidField("format", "must be one of json, csv, html, pdf")
}

// renderStatementPDF answers the statement as a PDF for filing (statementpdf), with the
// facility's name and the project's code and title beside the record.
func (s *Server) renderStatementPDF(c echo.Context, st scheduling.Statement) error {
	ctx := c.Request().Context()
	rec := st.Record()
	f, err := s.store.Facility(ctx)
	if err != nil {
		return err
	}
	p, err := s.visibleProject(ctx, rec.ProjectID)
	if err != nil {
		return err
	}
	var buf bytes.Buffer
	if err := statementpdf.Write(&buf, rec, statementpdf.Meta{Facility: f.Name, ProjectCode: p.Code, ProjectTitle: p.Title,
		Generated: s.now()}); err != nil {
		return err
	}
	c.Response().Header().Set("Content-Disposition", fmt.Sprintf(`attachment; filename="statement-%s.pdf"`, rec.ID))
	return c.Blob(http.StatusOK, "application/pdf", buf.Bytes())
}

func (s *Server) handleStatementIssue(c echo.Context) error {
	st, err := s.visibleStatement(c)
	if err != nil {
		return err
	}
	ctx := c.Request().Context()
	out, err := s.store.IssueStatement(ctx, st.Record().ID, principal(ctx).UserID, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, out)
}

// adjustmentInput is a manager's credit or debit; the split defaults to the project's.
type adjustmentInput struct {
	AmountMinor         int64                     `json:"amount_minor"`
	Reason              string                    `json:"reason"`
	Funding             []scheduling.FundingShare `json:"funding"`
	CorrectsStatementID string                    `json:"corrects_statement_id"`
}

// handleAdjustmentCreate records an adjustment now; it falls on the statement of the
// current month.
func (s *Server) handleAdjustmentCreate(c echo.Context) error {
	var in adjustmentInput
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx, p, err := s.paramProject(c)
	if err != nil {
		return err
	}
	if len(in.Funding) == 0 {
		if in.Funding, err = s.store.ProjectFunding(ctx, p.ID); err != nil {
			return err
		}
		if len(in.Funding) == 0 {
			return beamledger.InvalidField("funding", "is required: the project has no default funding split")
		}
	}
	now := s.now()
	adj := scheduling.Adjustment{At: now, AmountMinor: in.AmountMinor, Reason: in.Reason, By: principal(ctx).UserID,
		Funding: in.Funding, CorrectsStatementID: in.CorrectsStatementID}
	if err := adj.Validate(); err != nil {
		return err
	}
	loc, err := s.facilityLocation(ctx)
	if err != nil {
		return err
	}
	from, _ := scheduling.PeriodBounds(scheduling.PeriodMonth, now, loc)
	out, err := s.store.AddAdjustment(ctx, p.ID, adj, from)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, out)
}

// recoveryAnswer is a fiscal year's recovery report.
type recoveryAnswer struct {
	FiscalYear int                       `json:"fiscal_year"`
	From       time.Time                 `json:"from"`
	To         time.Time                 `json:"to"`
	Lines      []scheduling.RecoveryLine `json:"lines"`
	Entries    []scheduling.CostEntry    `json:"entries"`
}

// fiscalYear reads the fiscal_year parameter as its bounds in the facility's zone: the
// facility's fiscal year, which starts in the month its billing policy names and is
// named by the calendar year it ends in.
func (s *Server) fiscalYear(c echo.Context, loc *time.Location) (year int, from, to time.Time, err error) {
	year, perr := strconv.Atoi(c.QueryParam("fiscal_year"))
	if perr != nil || year < 2000 || year > 2200 {
		return year, from, to, beamledger.InvalidField("fiscal_year", "must be a year between 2000 and 2200")
	}
	p, err := s.store.FacilityBillingPolicy(c.Request().Context())
	if err != nil {
		return year, from, to, err
	}
	from, to = scheduling.FiscalYearBounds(year, p.FiscalYearStartMonth, loc)
	return year, from, to, nil
}

// handleRecoveryReport compares a fiscal year's cost entries with the charges of
// statements issued for its months.
func (s *Server) handleRecoveryReport(c echo.Context) error {
	ctx := c.Request().Context()
	loc, err := s.facilityLocation(ctx)
	if err != nil {
		return err
	}
	year, from, to, err := s.fiscalYear(c, loc)
	if err != nil {
		return err
	}
	entries, err := s.reports().CostEntries(ctx, year)
	if err != nil {
		return err
	}
	charged, err := s.reports().IssuedChargesByInstrument(ctx, from, to)
	if err != nil {
		return err
	}
	costs := map[string]int64{}
	for _, e := range entries {
		costs[e.InstrumentID] += e.AmountMinor
	}
	return c.JSON(http.StatusOK, recoveryAnswer{FiscalYear: year, From: from.UTC(), To: to.UTC(), Lines: scheduling.Recovery(costs, charged), Entries: entries})
}

// statementPage is the printable statement: plain HTML with its own print styles, so a
// browser's "print to PDF" gives the paper copy.
var statementPage = template.Must(template.New("statement").Funcs(template.FuncMap{
	"money": scheduling.FormatMinor,
	"instant": func(t *time.Time) string {
		if t == nil {
			return ""
		}
		return t.UTC().Format("2006-01-02 15:04 UTC")
	},
	"date": func(t time.Time) string { return t.UTC().Format(time.DateOnly) },
}).Parse(`<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>Statement {{.ID}}</title>
<style>
body{font:11pt/1.4 system-ui,sans-serif;margin:2em}
table{border-collapse:collapse;width:100%}
th,td{border-bottom:1px solid #999;padding:.2em .4em;text-align:left;vertical-align:top}
td.n,th.n{text-align:right;font-variant-numeric:tabular-nums}
@media print{body{margin:0}}
</style></head><body>
<h1>Statement of charges</h1>
<p>Project {{.ProjectID}} · period {{date .PeriodStart}} to {{date .PeriodEnd}} (end exclusive) · {{.Status}}{{if .IssuedAt}} on {{instant .IssuedAt}}{{end}} · amounts in {{.Currency}}</p>
<p>Statement {{.ID}} · ledger state SHA-256 <code class="digest">{{.Digest}}</code></p>
<table>
<thead><tr><th>#</th><th>Booking</th><th>Component</th><th>Rule</th><th>From</th><th>To</th><th class="n">Minutes</th><th class="n">Rate/h</th><th class="n">Amount</th><th>Accounts</th></tr></thead>
<tbody>
{{- $cur := .Currency}}
{{range .Lines}}<tr><td>{{.LineNo}}</td><td>{{.BookingID}}{{if .Reason}}{{if .BookingID}}<br>{{end}}{{.Reason}}{{end}}</td><td>{{.Component}}</td><td>{{.Rule}}</td><td>{{instant .From}}</td><td>{{instant .To}}</td>
<td class="n">{{.Minutes}}</td><td class="n">{{money .HourlyRateMinor $cur}}</td><td class="n">{{money .AmountMinor $cur}}</td>
<td>{{range .Allocations}}{{.AccountID}}: {{money .AmountMinor $cur}}<br>{{end}}</td></tr>
{{end}}</tbody>
<tfoot><tr><th colspan="8">Total</th><th class="n">{{money .TotalMinor .Currency}}</th><th>{{range .AccountTotals}}{{.AccountID}}: {{money .AmountMinor $cur}}<br>{{end}}</th></tr></tfoot>
</table>
</body></html>
`))

func (s *Server) renderStatementHTML(c echo.Context, st scheduling.Statement) error {
	rec := st.Record()
	digest, err := provenance.StateDigest(rec)
	if err != nil {
		return err
	}
	page := struct {
		scheduling.StatementRecord
		Digest string // of the state its ledger event holds
	}{rec, hex.EncodeToString(digest[:])}
	var buf bytes.Buffer
	if err := statementPage.Execute(&buf, page); err != nil {
		return err
	}
	return c.HTMLBlob(http.StatusOK, buf.Bytes())
}
