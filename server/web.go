package server

import (
	"context"
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

// webRoutes mounts the pages. A page is a route for signed-in people like any other;
// in a browser the session cookie is the credential (cookieCredentials), and the
// API calls the pages' scripts make are authorized the same way.
func (s *Server) webRoutes(add func(method, path string, r rule, h echo.HandlerFunc)) {
	s.echo.Use(s.cookieCredentials)
	pageFor := func(path string, r rule, h pageHandler) {
		if !isPagePath(path) {
			panic("web: " + path + " is missing from isPagePath")
		}
		add(http.MethodGet, path, r, s.page(h))
	}
	page := func(path string, h pageHandler) { pageFor(path, users(everyone...), h) }
	page("/", s.handleStartPage)
	page("/calendar", s.handleCalendarPage)
	page("/acquire", s.handleAcquirePage)
	page("/files", s.handleFilesPage)
	page("/trace", s.handleTracePage)
	page("/statements", s.handleStatementsPage)
	pageFor("/reports", users(readersAll...), s.handleReportsPage)
	page("/ledger", s.handleLedgerPage)
	pageFor("/qualifications", users(facilityOps...), s.handleQualificationsPage)
	page("/rates", s.handleRatesPage)
	pageFor("/instruments", users(readersAll...), s.handleInstrumentsPage)
	pageFor("/people", users(readersAll...), s.handlePeoplePage)
	pageFor("/service", users(facilityOps...), s.handleServicePage)
	add(http.MethodGet, "/signin", open(), s.handleSignInPage)
	add(http.MethodPost, "/signin", open(), s.handleSignIn)
	add(http.MethodPost, "/signout", open(), s.handleSignOut)
	add(http.MethodPost, "/session/refresh", open(), s.handleSessionRefresh)
	files := http.FileServerFS(web.Static())
	// Folders are not listed: only the named assets are served.
	static := http.StripPrefix("/static/", http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Path == "" || strings.HasSuffix(r.URL.Path, "/") {
			http.NotFound(w, r)
			return
		}
		files.ServeHTTP(w, r)
	}))
	add(http.MethodGet, "/static/*", open(), echo.WrapHandler(static))
}

// isPagePath lists the pages, which a browser with no session is sent from to the
// sign-in form.
func isPagePath(p string) bool {
	switch p {
	case "/", "/calendar", "/acquire", "/files", "/trace", "/statements", "/reports", "/ledger", "/qualifications", "/rates",
		"/instruments", "/people", "/service":
		return true
	}
	return false
}

// pageHandler renders a page for a signed-in viewer, given the common page data.
type pageHandler func(c echo.Context, me accounts.Principal, pg web.Page) error

// page wraps a pageHandler with the page data every page shares.
func (s *Server) page(h pageHandler) echo.HandlerFunc {
	return func(c echo.Context) error {
		me := principal(c.Request().Context())
		pg, err := s.pageBase(c, me)
		if err != nil {
			return err
		}
		c.Response().Header().Set("Cache-Control", "no-store")
		return h(c, me, pg)
	}
}

func (s *Server) pageBase(c echo.Context, me accounts.Principal) (web.Page, error) {
	ctx := c.Request().Context()
	pg := web.Page{FacilityName: "beamledger", TimeZone: "UTC", Demo: s.cfg.Demo, CSRF: s.csrfToken(c)}
	if f, err := s.store.Facility(ctx); err == nil {
		pg.FacilityName, pg.TimeZone = f.Name, f.TimeZone
	}
	if me.UserID != "" {
		u, err := s.store.User(ctx, me.UserID)
		if err != nil {
			return pg, err
		}
		pg.Viewer = &web.Viewer{ID: u.ID, Name: u.DisplayName, Email: u.Email, Role: string(me.Role),
			Books: me.Role != accounts.RoleAuditor, Staff: me.FacilityWide(), ReadsAll: me.CanReadEverything()}
	}
	return pg, nil
}

func (s *Server) render(c echo.Context, status int, name, block string, data any) error {
	c.Response().Header().Set(echo.HeaderContentType, echo.MIMETextHTMLCharsetUTF8)
	c.Response().WriteHeader(status)
	return s.pages.Render(c.Response(), name, block, data)
}

func (s *Server) handleSignInPage(c echo.Context) error {
	if s.signedIn(c) {
		return c.Redirect(http.StatusSeeOther, "/")
	}
	return s.renderSignIn(c)
}

func (s *Server) renderSignIn(c echo.Context) error {
	pg, err := s.pageBase(c, accounts.Principal{})
	if err != nil {
		return err
	}
	pg.Title = "Sign in"
	return s.render(c, http.StatusOK, "signin", "layout", web.SignInData{Page: pg})
}

// handleStartPage shows the viewer's coming bookings, qualifications, projects and
// recent acquisitions.
func (s *Server) handleStartPage(c echo.Context, me accounts.Principal, pg web.Page) error {
	ctx := c.Request().Context()
	pg.Title, pg.Nav, pg.Script = "Overview", "start", "start.js"
	d := web.StartData{Page: pg}
	n, err := s.recordNames(ctx)
	if err != nil {
		return err
	}
	projects, err := s.store.Projects(ctx, accounts.ProjectFilter{MemberID: me.UserID})
	if err != nil {
		return err
	}
	for _, p := range projects {
		n.projects[p.ID] = p.Code
		part := "member"
		if p.PrincipalInvestigatorID == me.UserID {
			part = "principal investigator"
		}
		d.Projects = append(d.Projects, web.StartProject{Code: p.Code, Title: p.Title, RateClass: string(p.RateClass), Part: part})
	}
	now := s.now()
	bs, err := s.store.Bookings(ctx, scheduling.BookingFilter{UserID: me.UserID, From: now, To: now.AddDate(0, 0, 60)})
	if err != nil {
		return err
	}
	for _, b := range bs {
		st := b.Start.In(n.loc)
		d.Bookings = append(d.Bookings, web.StartBooking{When: st.Format("Mon 2 Jan 15:04") + "–" + b.End.In(n.loc).Format("15:04"),
			Instrument: n.instruments[b.InstrumentID], Kind: string(b.Kind), Project: n.project(ctx, b.ProjectID), Status: string(b.Status),
			CalendarLink: "/calendar?view=day&instrument=" + b.InstrumentID + "&date=" + st.Format(time.DateOnly)})
	}
	qs, err := s.store.Qualifications(ctx, scheduling.QualificationFilter{UserID: me.UserID})
	if err != nil {
		return err
	}
	for _, q := range qs {
		sq := web.StartQualification{Instrument: n.instruments[q.InstrumentID], Level: string(q.Level), Granted: q.GrantedAt.In(n.loc).Format("2 Jan 2006")}
		if q.ExpiresAfterIdleDays != nil {
			sq.Expiry = "lapses after " + strconv.Itoa(*q.ExpiresAfterIdleDays) + " days without use"
		}
		d.Qualifications = append(d.Qualifications, sq)
	}
	f := provenance.AcquisitionFilter{Limit: 8}
	if !me.CanReadEverything() {
		f.ProjectIDs = make([]string, 0, len(projects))
		for _, p := range projects {
			f.ProjectIDs = append(f.ProjectIDs, p.ID)
		}
	}
	as, err := s.store.Acquisitions(ctx, f)
	if err != nil {
		return err
	}
	for _, a := range as {
		d.Acquisitions = append(d.Acquisitions, web.StartAcquisition{ID: a.ID, When: a.StartedAt.In(n.loc).Format("Mon 2 Jan 15:04"),
			Instrument: n.instruments[a.InstrumentID], Project: n.project(ctx, a.ProjectID),
			Correctable: me.FacilityWide() || a.UserID == me.UserID})
	}
	return s.render(c, http.StatusOK, "start", "layout", d)
}

// recordNamer holds what the record pages show records by: the facility's zone, the
// instruments' codes, and the projects' codes as they are first asked for.
type recordNamer struct {
	s           *Server
	loc         *time.Location
	instruments map[string]string
	projects    map[string]string
}

func (s *Server) recordNames(ctx context.Context) (*recordNamer, error) {
	loc, err := s.facilityLocation(ctx)
	if err != nil {
		return nil, err
	}
	names, err := s.instrumentCodes(ctx)
	if err != nil {
		return nil, err
	}
	return &recordNamer{s: s, loc: loc, instruments: names, projects: map[string]string{}}, nil
}

// project returns a project's code, looking it up once.
func (n *recordNamer) project(ctx context.Context, id string) string {
	code, ok := n.projects[id]
	if !ok {
		code = n.s.projectCode(ctx, id)
		n.projects[id] = code
	}
	return code
}

func (s *Server) projectCode(ctx context.Context, id string) string {
	if p, err := s.store.Project(ctx, id); err == nil {
		return p.Code
	}
	return ""
}

// instrumentCodes maps instrument ids to their codes.
func (s *Server) instrumentCodes(ctx context.Context) (map[string]string, error) {
	ins, err := s.store.Instruments(ctx)
	if err != nil {
		return nil, err
	}
	out := make(map[string]string, len(ins))
	for _, in := range ins {
		out[in.ID] = in.Code
	}
	return out, nil
}

// viewerProjects are the projects the viewer may book or record for, as options:
// their own, or every project for staff and managers.
func (s *Server) viewerProjects(ctx context.Context, me accounts.Principal) ([]accounts.Project, []web.Option, error) {
	f := accounts.ProjectFilter{MemberID: me.UserID}
	if me.FacilityWide() {
		f = accounts.ProjectFilter{}
	}
	ps, err := s.store.Projects(ctx, f)
	if err != nil {
		return nil, nil, err
	}
	slices.SortFunc(ps, func(a, b accounts.Project) int { return strings.Compare(a.Code, b.Code) })
	opts := make([]web.Option, 0, len(ps))
	for _, p := range ps {
		opts = append(opts, web.Option{Value: p.ID, Label: p.Code + " — " + p.Title})
	}
	return ps, opts, nil
}
