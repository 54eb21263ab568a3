package scheduling

import (
	"encoding/csv"
	"io"
	"strconv"
	"time"
)

// StatementCSVColumns returns the columns WriteStatementCSV writes, in order. They are a
// contract with finance systems: add new columns at the end, never rename, reorder or
// drop one.
//
//	statement_id        the statement's id
//	project_id          the project's id
//	period_start        start of the period, RFC 3339 in UTC (inclusive)
//	period_end          end of the period, RFC 3339 in UTC (exclusive)
//	status              draft or issued
//	currency            ISO 4217 code of every amount in the row
//	line_no             the statement line, from 1; a line split across accounts spans rows
//	booking_id          the booking charged; empty for monthly_cap and adjustment lines
//	instrument_id       the booking's instrument
//	booking_kind        independent, assisted, training or unattended
//	booking_start       the booking's start, RFC 3339 in UTC
//	component           instrument_time, staff_time, late_cancellation, no_show, monthly_cap, adjustment
//	rule                the rule behind the line: greater_of_booked_and_used, booked_time, used_time,
//	                    minimum_charge, late_cancellation, no_show, unattended_cap, monthly_cap,
//	                    manager_adjustment
//	from, to            the span the line's minutes were measured on, RFC 3339 in UTC
//	minutes             the minutes charged
//	hourly_rate_minor   the hourly rate, in minor units
//	line_amount_minor   the whole line's amount, in minor units (repeated on each of its rows)
//	funding_account_id  the account this row posts to
//	amount_minor        this row's part of the line, in minor units; the column sums to the
//	                    statement's total
//	amount              the same in major units as a decimal ("775.00"), for people
//	reason              an adjustment's reason
//	adjustment_id       an adjustment's id
//	corrects_statement_id  the issued statement an adjustment corrects, if any
func StatementCSVColumns() []string {
	return []string{
		"statement_id", "project_id", "period_start", "period_end", "status", "currency",
		"line_no", "booking_id", "instrument_id", "booking_kind", "booking_start",
		"component", "rule", "from", "to", "minutes", "hourly_rate_minor", "line_amount_minor",
		"funding_account_id", "amount_minor", "amount", "reason", "adjustment_id",
		"corrects_statement_id",
	}
}

// WriteStatementCSV writes a statement as CSV (RFC 4180, CRLF line ends, which finance
// imports expect) with a header of StatementCSVColumns() and one row per line and funding
// account, since that is what a finance system posts. Amounts are whole minor units, plus
// a decimal in major units; instants are RFC 3339 in UTC, so a row reads the same
// wherever it is opened.
func WriteStatementCSV(w io.Writer, s Statement) error {
	rec := s.Record()
	cw := csv.NewWriter(w)
	cw.UseCRLF = true
	if err := cw.Write(StatementCSVColumns()); err != nil {
		return err
	}
	instant := func(t *time.Time) string {
		if t == nil {
			return ""
		}
		return t.UTC().Format(time.RFC3339)
	}
	head := []string{rec.ID, rec.ProjectID, instant(&rec.PeriodStart), instant(&rec.PeriodEnd), string(rec.Status), rec.Currency}
	for _, l := range rec.Lines {
		line := []string{strconv.Itoa(l.LineNo), l.BookingID, l.InstrumentID, string(l.BookingKind), instant(l.BookingStart),
			string(l.Component), string(l.Rule), instant(l.From), instant(l.To), strconv.Itoa(l.Minutes),
			strconv.FormatInt(l.HourlyRateMinor, 10), strconv.FormatInt(l.AmountMinor, 10)}
		for _, al := range l.Allocations {
			row := append(append(append([]string{}, head...), line...), al.AccountID,
				strconv.FormatInt(al.AmountMinor, 10), FormatMinor(al.AmountMinor, rec.Currency), l.Reason, l.AdjustmentID, l.CorrectsStatementID)
			if err := cw.Write(row); err != nil {
				return err
			}
		}
	}
	cw.Flush()
	return cw.Error()
}
