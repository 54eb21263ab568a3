package server

import (
	"context"
	"net/http"
	"net/url"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/web"
)

// calendarQuery is what a calendar address asks for.
type calendarQuery struct {
	view       string // day, week, facility
	instrument string
	day        time.Time // local midnight
}

func (q calendarQuery) url(view string, day time.Time) string {
	v := url.Values{"view": {view}, "date": {day.Format(time.DateOnly)}}
	if q.instrument != "" {
		v.Set("instrument", q.instrument)
	}
	return "/calendar?" + v.Encode()
}

// handleCalendarPage draws an instrument's day or week, or every instrument's day,
// in the facility zone. An htmx request gets the grid alone.
func (s *Server) handleCalendarPage(c echo.Context, me accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	loc, err := s.facilityLocation(ctx)
	if err != nil {
		return err
	}
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return err
	}
	q := calendarQuery{view: c.QueryParam("view"), instrument: c.QueryParam("instrument")}
	if q.view != "day" && q.view != "facility" {
		q.view = "week"
	}
	q.day = web.LocalMidnight(s.now(), loc)
	if d := c.QueryParam("date"); d != "" {
		t, err := time.ParseInLocation(time.DateOnly, d, loc)
		if err != nil {
			return beamledger.InvalidField("date", "must be a day such as 2026-12-07")
		}
		q.day = web.LocalMidnight(t, loc)
	}
	var bookable []scheduling.Instrument
	for _, in := range ins {
		if in.Bookable {
			bookable = append(bookable, in)
		}
	}
	if len(bookable) == 0 {
		return beamledger.NotFound("bookable instrument")
	}
	current := bookable[0]
	for _, in := range bookable {
		if in.ID == q.instrument {
			current = in
		}
	}
	q.instrument = current.ID

	pg.Title, pg.Nav, pg.Script = "Beam time", "calendar", "calendar.js"
	d := web.CalendarData{Page: pg, View: q.view, Date: q.day.Format(time.DateOnly), InstrumentID: current.ID,
		Kinds: []string{"independent", "assisted", "training", "unattended"}}
	if me.FacilityWide() {
		d.Kinds = append(d.Kinds, "service")
	}
	for _, in := range bookable {
		d.Instruments = append(d.Instruments, web.Option{Value: in.ID, Label: in.Code + " — " + in.Name, Selected: in.ID == current.ID})
	}
	if _, d.Projects, err = s.viewerProjects(ctx, me); err != nil {
		return err
	}
	step := 1
	var cols []colPlan
	switch q.view {
	case "day":
		cols = []colPlan{{in: current, day: q.day, heading: current.Code + " · " + q.day.Format("Mon 2 Jan")}}
		d.RangeLabel = current.Code + " · " + q.day.Format("Monday 2 January 2006")
	case "week":
		step = 7
		monday := q.day.AddDate(0, 0, -((int(q.day.Weekday()) + 6) % 7))
		for i := range 7 {
			day := web.LocalMidnight(monday.AddDate(0, 0, i), loc)
			cols = append(cols, colPlan{in: current, day: day, heading: day.Format("Mon 2 Jan")})
		}
		d.RangeLabel = current.Code + " · week of " + monday.Format("2 January 2006")
	case "facility":
		for _, in := range bookable {
			cols = append(cols, colPlan{in: in, day: q.day, heading: in.Code})
		}
		d.RangeLabel = "All instruments · " + q.day.Format("Monday 2 January 2006")
	}
	if d.Columns, err = s.calendarColumns(ctx, me, loc, cols); err != nil {
		return err
	}
	d.GridURL = q.url(q.view, q.day)
	d.PrevURL = q.url(q.view, q.day.AddDate(0, 0, -step))
	d.NextURL = q.url(q.view, q.day.AddDate(0, 0, step))
	d.TodayURL = q.url(q.view, web.LocalMidnight(s.now(), loc))
	d.DayURL, d.WeekURL, d.FacilityURL = q.url("day", q.day), q.url("week", q.day), q.url("facility", q.day)
	c.Response().Header().Add(echo.HeaderVary, "HX-Request")
	if c.Request().Header.Get("HX-Request") == "true" && c.Request().Header.Get("HX-History-Restore-Request") != "true" {
		return s.render(c, http.StatusOK, "calendar", "grid", d)
	}
	return s.render(c, http.StatusOK, "calendar", "layout", d)
}

// colPlan is one column to draw: an instrument on a local day.
type colPlan struct {
	in      scheduling.Instrument
	day     time.Time
	heading string
}

// calendarColumns reads the bookings and rules the columns need and draws them. Who
// may see what follows the calendar API: the range and kind of every booking, the
// project and note only for those who may read the booking.
func (s *Server) calendarColumns(ctx context.Context, me accounts.Principal, loc *time.Location, plans []colPlan) ([]web.Column, error) {
	from := plans[0].day
	to := web.LocalMidnight(plans[len(plans)-1].day.AddDate(0, 0, 1), loc)
	f := scheduling.BookingFilter{From: from, To: to}
	if plans[0].in.ID == plans[len(plans)-1].in.ID {
		f.InstrumentID = plans[0].in.ID
	}
	bs, err := s.store.Bookings(ctx, f)
	if err != nil {
		return nil, err
	}
	mine, err := s.myProjects(ctx, me)
	if err != nil {
		return nil, err
	}
	fo, err := s.store.FacilityRules(ctx)
	if err != nil {
		return nil, err
	}
	codes := map[string]string{}
	views := map[string][]web.BookingView{}
	for _, b := range bs {
		v := web.BookingView{Booking: b, Mine: b.UserID == me.UserID}
		if me.CanReadEverything() || v.Mine || mine[b.ProjectID] || b.Kind == scheduling.KindService {
			if b.ProjectID != "" {
				if _, ok := codes[b.ProjectID]; !ok {
					codes[b.ProjectID] = s.projectCode(ctx, b.ProjectID)
				}
				v.Detail = codes[b.ProjectID]
			}
			if b.Note != "" {
				v.Detail = joinNonEmpty(v.Detail, b.Note)
			}
		}
		v.Changeable = me.FacilityWide() || (v.Mine && b.Kind != scheduling.KindService)
		views[b.InstrumentID] = append(views[b.InstrumentID], v)
	}
	rules := map[string]scheduling.Rules{}
	cols := make([]web.Column, 0, len(plans))
	for _, p := range plans {
		r, ok := rules[p.in.ID]
		if !ok {
			io, err := s.store.InstrumentRules(ctx, p.in.ID)
			if err != nil {
				return nil, err
			}
			r = scheduling.DefaultRules().With(fo).With(io)
			rules[p.in.ID] = r
		}
		cols = append(cols, web.BuildColumn(web.ColumnInput{Heading: p.heading, InstrumentID: p.in.ID, Day: p.day, Loc: loc,
			Slot: time.Duration(r.SlotMinutes) * time.Minute, OpeningHours: r.OpeningHours, Now: s.now(), Bookings: views[p.in.ID]}))
	}
	return cols, nil
}

func joinNonEmpty(a, b string) string {
	if a == "" {
		return b
	}
	return a + " · " + b
}
