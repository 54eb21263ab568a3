package server

import (
	"context"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/web"
)

// Service windows shown: those that ended in the last month, and those to come in the
// next quarter.
const (
	serviceRecentDays = 30
	serviceComingDays = 92
)

// handleServicePage shows the service windows per instrument with the bookings each
// displaced, so that staff can offer those people other time, and the form to book
// service time. An htmx request gets the list alone.
func (s *Server) handleServicePage(c echo.Context, _ accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Service time", "service", "service.js"
	n, err := s.recordNames(ctx)
	if err != nil {
		return err
	}
	now := s.now()
	next := now.In(n.loc).Truncate(time.Hour).Add(24 * time.Hour)
	d := web.ServiceData{Page: pg, DefaultStart: next.Format("2006-01-02T15:04"), DefaultEnd: next.Add(2 * time.Hour).Format("2006-01-02T15:04")}
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return err
	}
	for _, in := range ins {
		d.Instruments = append(d.Instruments, web.Option{Value: in.ID, Label: in.Code + " — " + in.Name})
	}
	bs, err := s.store.Bookings(ctx, scheduling.BookingFilter{From: now.AddDate(0, 0, -serviceRecentDays), To: now.AddDate(0, 0, serviceComingDays)})
	if err != nil {
		return err
	}
	people := map[string]accounts.User{}
	for _, b := range bs {
		if b.Kind != scheduling.KindService {
			continue
		}
		w, err := s.serviceWindow(ctx, n, people, b)
		if err != nil {
			return err
		}
		if b.End.After(now) {
			d.Coming = append(d.Coming, w)
		} else {
			d.Recent = append(d.Recent, w)
		}
	}
	c.Response().Header().Add(echo.HeaderVary, "HX-Request")
	if c.Request().Header.Get("HX-Request") == "true" && c.Request().Header.Get("HX-History-Restore-Request") != "true" {
		return s.render(c, http.StatusOK, "service", "windows", d)
	}
	return s.render(c, http.StatusOK, "service", "layout", d)
}

// serviceWindow describes one service booking and the bookings it displaced.
func (s *Server) serviceWindow(ctx context.Context, n *recordNamer, people map[string]accounts.User, b scheduling.Booking) (web.ServiceWindow, error) {
	person := func(id string) accounts.User {
		u, ok := people[id]
		if !ok {
			u, _ = s.store.User(ctx, id) // a missing person shows as blank, not as a broken page
			people[id] = u
		}
		return u
	}
	w := web.ServiceWindow{ID: b.ID, Instrument: n.instruments[b.InstrumentID], When: span(b.Start.In(n.loc), b.End.In(n.loc)),
		Note: b.Note, BookedBy: person(b.CreatedBy).DisplayName}
	for _, id := range b.Displaced {
		db, err := s.store.Booking(ctx, id)
		if err != nil {
			return w, err
		}
		u := person(db.UserID)
		st := db.Start.In(n.loc)
		w.Displaced = append(w.Displaced, web.DisplacedBooking{When: span(st, db.End.In(n.loc)), Kind: string(db.Kind),
			Person: u.DisplayName, Email: u.Email, Project: n.project(ctx, db.ProjectID),
			RebookLink: "/calendar?view=week&instrument=" + db.InstrumentID + "&date=" + st.Format(time.DateOnly)})
	}
	return w, nil
}

// span shows a local range, naming the end's day only when it differs.
func span(start, end time.Time) string {
	if start.Format(time.DateOnly) == end.Format(time.DateOnly) {
		return start.Format("Mon 2 Jan 15:04") + "–" + end.Format("15:04")
	}
	return start.Format("Mon 2 Jan 15:04") + " – " + end.Format("Mon 2 Jan 15:04")
}
