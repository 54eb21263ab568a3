package server

import (
	"net/http"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
	"beamledger/web"
)

// handleAcquirePage is the acquisition form: the bookings the viewer may record on
// (the last fortnight and the coming week) and the specimens of their projects. The
// form's script fills the conditions from the chosen booking's instrument.
func (s *Server) handleAcquirePage(c echo.Context, me accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Record acquisition", "acquire", "acquire.js"
	d := web.AcquireData{Page: pg}
	n, err := s.recordNames(ctx)
	if err != nil {
		return err
	}
	now := s.now()
	f := scheduling.BookingFilter{From: now.AddDate(0, 0, -14), To: now.AddDate(0, 0, 7)}
	if !me.FacilityWide() {
		f.UserID = me.UserID
	}
	bs, err := s.store.Bookings(ctx, f)
	if err != nil {
		return err
	}
	for i := len(bs) - 1; i >= 0; i-- { // latest first
		b := bs[i]
		if b.Kind == scheduling.KindService {
			continue
		}
		st, end := b.Start.In(n.loc), b.End.In(n.loc)
		d.Bookings = append(d.Bookings, web.AcquireBooking{ID: b.ID, InstrumentID: b.InstrumentID, ProjectID: b.ProjectID,
			Start: st.Format(time.RFC3339), End: end.Format(time.RFC3339),
			Label: n.instruments[b.InstrumentID] + " · " + st.Format("Mon 2 Jan 15:04") + "–" + end.Format("15:04") + " · " + n.project(ctx, b.ProjectID)})
	}
	sf := provenance.SpecimenFilter{}
	if sf.ProjectIDs, err = s.readableProjectIDs(ctx); err != nil {
		return err
	}
	sps, err := s.store.Specimens(ctx, sf)
	if err != nil {
		return err
	}
	for _, sp := range sps {
		d.Specimens = append(d.Specimens, web.Option{Value: sp.ID, Label: sp.Code + " — " + sp.Description})
	}
	af := provenance.AcquisitionFilter{Limit: 50, ProjectIDs: sf.ProjectIDs}
	as, err := s.store.Acquisitions(ctx, af)
	if err != nil {
		return err
	}
	for _, a := range as {
		if me.FacilityWide() || a.UserID == me.UserID {
			d.Correctable = append(d.Correctable, web.Option{Value: a.ID, Selected: a.ID == c.QueryParam("correct"),
				Label: n.instruments[a.InstrumentID] + " · " + a.StartedAt.In(n.loc).Format("Mon 2 Jan 15:04") + " · " + n.project(ctx, a.ProjectID) +
					" · version " + strconv.Itoa(a.Version)})
		}
	}
	return s.render(c, http.StatusOK, "acquire", "layout", d)
}

// handleStatementsPage lists the statements of the projects the viewer may read;
// managers also compute drafts and issue them.
func (s *Server) handleStatementsPage(c echo.Context, me accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Statements", "statements", "statements.js"
	loc, err := s.facilityLocation(ctx)
	if err != nil {
		return err
	}
	d := web.StatementsData{Page: pg, Month: s.now().In(loc).Format("2006-01"), Manage: me.Role == accounts.RoleManager}
	f := accounts.ProjectFilter{MemberID: me.UserID}
	if me.CanReadEverything() {
		f = accounts.ProjectFilter{}
	}
	ps, err := s.store.Projects(ctx, f)
	if err != nil {
		return err
	}
	slices.SortFunc(ps, func(a, b accounts.Project) int { return strings.Compare(a.Code, b.Code) })
	for _, p := range ps {
		d.Projects = append(d.Projects, web.Option{Value: p.ID, Label: p.Code + " — " + p.Title})
	}
	return s.render(c, http.StatusOK, "statements", "layout", d)
}

// handleQualificationsPage lets staff grant and revoke qualifications.
func (s *Server) handleQualificationsPage(c echo.Context, _ accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Qualifications", "qualifications", "qualifications.js"
	d := web.QualificationsData{Page: pg}
	us, err := s.store.Users(ctx, accounts.UserFilter{})
	if err != nil {
		return err
	}
	for _, u := range us {
		if !u.Disabled && u.Role != accounts.RoleAuditor {
			d.Users = append(d.Users, web.Option{Value: u.ID, Label: u.DisplayName + " (" + string(u.Role) + ")"})
		}
	}
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return err
	}
	for _, in := range ins {
		d.Instruments = append(d.Instruments, web.Option{Value: in.ID, Label: in.Code + " — " + in.Name})
	}
	return s.render(c, http.StatusOK, "qualifications", "layout", d)
}

// handleRatesPage shows the rate schedules; managers also get the rate calculator.
func (s *Server) handleRatesPage(c echo.Context, me accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Rates", "rates", "rates.js"
	f, err := s.store.Facility(ctx)
	if err != nil {
		return err
	}
	loc, err := time.LoadLocation(f.TimeZone)
	if err != nil {
		return err
	}
	now := s.now().In(loc)
	d := web.RatesData{Page: pg, Manage: me.Role == accounts.RoleManager, Currency: f.Currency,
		NextMonth: time.Date(now.Year(), now.Month()+1, 1, 0, 0, 0, 0, loc).Format(time.DateOnly)}
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return err
	}
	for _, in := range ins {
		if in.Bookable {
			d.Instruments = append(d.Instruments, web.Option{Value: in.ID, Label: in.Code + " — " + in.Name})
		}
	}
	return s.render(c, http.StatusOK, "rates", "layout", d)
}

// handleLedgerPage shows the ledger's head and checkpoints (the script checks their
// signatures).
func (s *Server) handleLedgerPage(c echo.Context, me accounts.Principal, pg web.Page) error {
	pg.Title, pg.Nav, pg.Script = "Ledger", "ledger", "ledger.js"
	return s.render(c, http.StatusOK, "ledger", "layout", web.LedgerData{Page: pg, Manage: me.Role == accounts.RoleManager})
}

// handleReportsPage draws the utilization and recovery reports as charts.
func (s *Server) handleReportsPage(c echo.Context, _ accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Reports", "reports", "reports.js"
	loc, err := s.facilityLocation(ctx)
	if err != nil {
		return err
	}
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return err
	}
	d := web.ReportsData{Page: pg, Month: s.now().In(loc).Format("2006-01")}
	for _, in := range ins {
		if in.Bookable {
			d.Instruments = append(d.Instruments, web.Option{Value: in.ID, Label: in.Code + " — " + in.Name})
		}
	}
	return s.render(c, http.StatusOK, "reports", "layout", d)
}

// handleTracePage finds a data file by its SHA-256 (the script fetches the trace).
func (s *Server) handleTracePage(c echo.Context, _ accounts.Principal, pg web.Page) error {
	pg.Title, pg.Nav, pg.Script = "Trace", "trace", "trace.js"
	d := web.TraceData{Page: pg}
	if v := strings.ToLower(c.QueryParam("sha256")); provenance.ValidSHA256(v) {
		d.Digest = v
	}
	return s.render(c, http.StatusOK, "trace", "layout", d)
}

// handleFilesPage is the data-file page: resumable upload into an acquisition, the
// files the viewer may read, and a file's lineage.
func (s *Server) handleFilesPage(c echo.Context, me accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Data files", "files", "files.js"
	d := web.FilesData{Page: pg, Selected: c.QueryParam("file")}
	n, err := s.recordNames(ctx)
	if err != nil {
		return err
	}
	f := provenance.AcquisitionFilter{Limit: 50}
	if f.ProjectIDs, err = s.readableProjectIDs(ctx); err != nil {
		return err
	}
	as, err := s.store.Acquisitions(ctx, f)
	if err != nil {
		return err
	}
	for _, a := range as {
		d.Acquisitions = append(d.Acquisitions, web.Option{Value: a.ID, Selected: a.ID == c.QueryParam("acquisition"),
			Label: n.instruments[a.InstrumentID] + " · " + a.StartedAt.In(n.loc).Format("Mon 2 Jan 15:04") + " · " + n.project(ctx, a.ProjectID)})
	}
	return s.render(c, http.StatusOK, "files", "layout", d)
}
