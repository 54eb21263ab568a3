package server

import (
	"bytes"
	"encoding/csv"
	"net/http"
	"slices"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/scheduling"
)

// utilizationQuery is what both utilization reports take: a range from one local
// date to another (to exclusive) or the facility's fiscal year fiscal_year, and a
// format, json or csv.
type utilizationQuery struct {
	from, to time.Time
	loc      *time.Location
	csv      bool
}

// readUtilizationQuery reads the range and format, naming what is wrong; extra
// carries the handler's own checks into the same field errors.
func (s *Server) readUtilizationQuery(c echo.Context, extra func(beamledger.FieldErrors)) (utilizationQuery, error) {
	var q utilizationQuery
	loc, err := s.facilityLocation(c.Request().Context())
	if err != nil {
		return q, err
	}
	q.loc = loc
	fe := beamledger.FieldErrors{}
	day := func(field string) time.Time {
		t, err := time.ParseInLocation(time.DateOnly, c.QueryParam(field), loc)
		if err != nil {
			fe.Add(field, "must be a date as YYYY-MM-DD (local to the facility), or give fiscal_year instead")
		}
		return t
	}
	if c.QueryParam("fiscal_year") != "" {
		if c.QueryParam("from") != "" || c.QueryParam("to") != "" {
			return q, beamledger.InvalidField("fiscal_year", "give either fiscal_year or from and to, not both")
		}
		if _, q.from, q.to, err = s.fiscalYear(c, loc); err != nil {
			return q, err
		}
	} else {
		q.from, q.to = day("from"), day("to")
	}
	extra(fe)
	if err := fe.Err(); err != nil {
		return q, err
	}
	if !q.from.Before(q.to) || q.to.Sub(q.from) > 400*24*time.Hour {
		return q, beamledger.InvalidField("to", "must be after from, at most 400 days later")
	}
	switch c.QueryParam("format") {
	case "", "json":
	case "csv":
		q.csv = true
	default:
		return q, beamledger.InvalidField("format", "must be json or csv")
	}
	q.from, q.to = q.from.UTC(), q.to.UTC()
	return q, nil
}

// handleUtilizationReport reports an instrument's use over a range, as JSON or, with
// format=csv, as scheduling.UtilizationCSVColumns.
func (s *Server) handleUtilizationReport(c echo.Context) error {
	instrumentID := c.QueryParam("instrument_id")
	q, err := s.readUtilizationQuery(c, func(fe beamledger.FieldErrors) {
		if instrumentID == "" {
			fe.Add("instrument_id", "is required")
		}
	})
	if err != nil {
		return err
	}
	in, err := s.reports().UtilizationInputs(c.Request().Context(), instrumentID, q.from, q.to, s.now())
	if err != nil {
		return err
	}
	rep := scheduling.Utilization(instrumentID, q.from, q.to, q.loc, in.Rules.OpeningHours, in.Sums, in.Quotas)
	if !q.csv {
		return c.JSON(http.StatusOK, rep)
	}
	return utilizationCSV(c, []scheduling.UtilizationReport{rep})
}

// facilityUtilizationAnswer is every instrument's utilization report over one range.
type facilityUtilizationAnswer struct {
	From        time.Time                      `json:"from"`
	To          time.Time                      `json:"to"`
	Instruments []scheduling.UtilizationReport `json:"instruments"`
}

// handleFacilityUtilization reports every instrument's use over a range from one
// read of the facility's bookings, in instrument id order: JSON, or with format=csv
// the rows of every instrument's report under one header.
func (s *Server) handleFacilityUtilization(c echo.Context) error {
	q, err := s.readUtilizationQuery(c, func(beamledger.FieldErrors) {})
	if err != nil {
		return err
	}
	all, err := s.reports().UtilizationInputsAll(c.Request().Context(), q.from, q.to, s.now())
	if err != nil {
		return err
	}
	reps := make([]scheduling.UtilizationReport, 0, len(all))
	for id, in := range all {
		reps = append(reps, scheduling.Utilization(id, q.from, q.to, q.loc, in.Rules.OpeningHours, in.Sums, in.Quotas))
	}
	slices.SortFunc(reps, func(a, b scheduling.UtilizationReport) int { return strings.Compare(a.InstrumentID, b.InstrumentID) })
	if !q.csv {
		return c.JSON(http.StatusOK, facilityUtilizationAnswer{From: q.from, To: q.to, Instruments: reps})
	}
	return utilizationCSV(c, reps)
}

// utilizationCSV writes reports as CSV with CRLF line ends under one header row.
func utilizationCSV(c echo.Context, reps []scheduling.UtilizationReport) error {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	w.UseCRLF = true
	_ = w.Write(scheduling.UtilizationCSVColumns())
	for _, r := range reps {
		_ = w.WriteAll(r.UtilizationRows())
	}
	if err := w.Error(); err != nil {
		return err
	}
	return c.Blob(http.StatusOK, "text/csv; charset=utf-8", buf.Bytes())
}
