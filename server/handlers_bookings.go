package server

import (
	"context"
	"errors"
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
)

// facilityLocation is the facility's zone, in which wall times are read.
func (s *Server) facilityLocation(ctx context.Context) (*time.Location, error) {
	f, err := s.store.Facility(ctx)
	if err != nil {
		return nil, err
	}
	return time.LoadLocation(f.TimeZone)
}

type bookingInput struct {
	InstrumentID string                 `json:"instrument_id"`
	ProjectID    string                 `json:"project_id"`
	UserID       string                 `json:"user_id"`
	Kind         scheduling.BookingKind `json:"kind"`
	Start        string                 `json:"start"`
	End          string                 `json:"end"`
	StaffID      string                 `json:"staff_id"`
	Note         string                 `json:"note"`
}

// bookingAnswer is a booking as the API shows it: with its instants resolved, and,
// where a wall time fell in a DST gap or overlap, how it was read.
type bookingAnswer struct {
	scheduling.Booking
	Mine        bool                             `json:"mine"`
	Resolutions map[string]scheduling.Resolution `json:"resolutions,omitempty"`
}

// parseRange reads start and end: RFC 3339 with an offset, or wall time in the
// facility zone (read from storage only when a wall time needs it).
func (s *Server) parseRange(ctx context.Context, startText, endText string) (start, end time.Time, res map[string]scheduling.Resolution, err error) {
	var loc *time.Location
	parse := func(field, text string) (time.Time, scheduling.Resolution, error) {
		if t, err := time.Parse(time.RFC3339, text); err == nil {
			return t.UTC(), scheduling.ResolutionExact, nil
		}
		if loc == nil {
			l, err := s.facilityLocation(ctx)
			if err != nil {
				return time.Time{}, "", err
			}
			loc = l
		}
		return scheduling.ParseInstant(field, text, loc)
	}
	fe := beamledger.FieldErrors{}
	res = map[string]scheduling.Resolution{}
	var r scheduling.Resolution
	var e error
	if start, r, e = parse("start", startText); e != nil {
		if !errors.Is(e, beamledger.ErrInvalid) {
			return start, end, nil, e
		}
		fe.Add("start", beamledger.FieldReason(e))
	} else if r != scheduling.ResolutionExact {
		res["start"] = r
	}
	if end, r, e = parse("end", endText); e != nil {
		if !errors.Is(e, beamledger.ErrInvalid) {
			return start, end, nil, e
		}
		fe.Add("end", beamledger.FieldReason(e))
	} else if r != scheduling.ResolutionExact {
		res["end"] = r
	}
	if len(res) == 0 {
		res = nil
	}
	return start, end, res, fe.Err()
}

func (s *Server) handleBookingCreate(c echo.Context) error {
	var in bookingInput
	if err := bind(c, &in); err != nil {
		return err
	}
	ctx := c.Request().Context()
	me := principal(ctx)
	start, end, res, err := s.parseRange(ctx, in.Start, in.End)
	if err != nil {
		return err
	}
	if !start.Before(end) {
		// Refused before the store reads the range: a service booking looks for the
		// bookings it displaces first, and a reversed range is no range to look in.
		return beamledger.RuleViolation("range", "a booking must end after it starts", map[string]string{"end": "must be after start"})
	}
	nb, err := s.newBooking(ctx, me, in, start, end)
	if err != nil {
		return err
	}
	now := s.now()
	b, err := s.store.CreateBooking(ctx, nb, now, func(bc scheduling.BookingContext) error {
		if err := checkNewBooking(me, nb, bc, now); err != nil {
			return err
		}
		// Charges must have somewhere to go: a booking whose funding split posts to an
		// account not valid over the booked time is refused now, not at month end. The
		// split's accounts come with the booking context, in the same statement; they
		// are named only after the checks above found the booked user in the project.
		return scheduling.CheckFundingAt(bc.FundingSplit, bc.FundingAccounts, nb.Start, nb.End)
	})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, bookingAnswer{Booking: b, Mine: b.UserID == me.UserID, Resolutions: res})
}

// checkNewBooking applies, inside the booking's transaction, what needs stored state:
// project membership, the bookable flag, then the facility's rules.
func checkNewBooking(me accounts.Principal, nb scheduling.NewBooking, bc scheduling.BookingContext, now time.Time) error {
	if nb.Kind != scheduling.KindService && !bc.Member {
		if !me.FacilityWide() && nb.UserID == me.UserID {
			return beamledger.NotFound("project") // not theirs: do not confirm it exists
		}
		return beamledger.InvalidField("user_id", "is not a member of the project")
	}
	if bc.HeldUntil != nil && nb.Kind != scheduling.KindService {
		return beamledger.Conflict("part of that time is held for a waitlist offer until %s", bc.HeldUntil.UTC().Format(time.RFC3339))
	}
	if !bc.Bookable && nb.Kind != scheduling.KindService {
		return beamledger.RuleViolation("bookable", bc.InstrumentName+" is not open for booking; only staff book service time on it",
			map[string]string{"instrument_id": "is not bookable"})
	}
	return scheduling.CheckBooking(scheduling.BookingCheck{
		Kind: nb.Kind, Start: nb.Start, End: nb.End, Now: now, Loc: bc.Location, Rules: bc.Rules,
		Qualification: bc.Qualification, ByStaff: me.FacilityWide(), StaffID: nb.StaffID,
		PrimeUsedMinutes: bc.PrimeUsedMinutes,
	})
}

// newBooking checks who may book what for whom: researchers book for themselves in
// their own projects; staff and managers for anyone, and only they book service time.
func (s *Server) newBooking(ctx context.Context, me accounts.Principal, in bookingInput, start, end time.Time) (scheduling.NewBooking, error) {
	fe := beamledger.FieldErrors{}
	if !in.Kind.Valid() {
		fe.Add("kind", "must be one of independent, assisted, training, unattended, service")
	}
	if !accounts.ValidID(in.InstrumentID) {
		fe.Add("instrument_id", "must be an instrument id")
	}
	if in.UserID == "" {
		in.UserID = me.UserID
	}
	if !accounts.ValidID(in.UserID) {
		fe.Add("user_id", "must be a user id")
	}
	if in.StaffID != "" && !accounts.ValidID(in.StaffID) {
		fe.Add("staff_id", "must be a user id")
	}
	if len(in.Note) > 2000 {
		fe.Add("note", "is too long (at most 2000 characters)")
	}
	if in.Kind == scheduling.KindService {
		in.ProjectID = ""
	} else if !accounts.ValidID(in.ProjectID) {
		fe.Add("project_id", "must be a project id")
	}
	if err := fe.Err(); err != nil {
		return scheduling.NewBooking{}, err
	}
	if !me.FacilityWide() {
		if in.Kind == scheduling.KindService {
			return scheduling.NewBooking{}, beamledger.RuleViolation("service_by_staff", "service time is booked by staff", map[string]string{"kind": "service is for staff"})
		}
		if in.UserID != me.UserID {
			return scheduling.NewBooking{}, beamledger.Forbidden("researchers book for themselves; ask staff to book for someone else")
		}
	}
	if in.StaffID != "" {
		st, err := s.store.AuthState(ctx, in.StaffID)
		if err != nil || st.Disabled || !st.Role.FacilityWide() {
			return scheduling.NewBooking{}, beamledger.InvalidField("staff_id", "must name an active staff member or manager")
		}
	}
	return scheduling.NewBooking{
		InstrumentID: in.InstrumentID, ProjectID: in.ProjectID, UserID: in.UserID, StaffID: in.StaffID,
		Kind: in.Kind, Start: start, End: end, Note: strings.TrimSpace(in.Note), Actor: me.ID(),
	}, nil
}

// visibleBooking loads a booking the caller may see in full: their own, their
// projects', or any for those who read everything. Others' are "not found".
func (s *Server) visibleBooking(ctx context.Context, id string) (scheduling.Booking, error) {
	b, err := s.store.Booking(ctx, id)
	if err != nil {
		return b, err
	}
	if !s.mayReadBooked(ctx, b.UserID, b.ProjectID, b.Kind) {
		return scheduling.Booking{}, beamledger.NotFound("booking")
	}
	return b, nil
}

// mayReadBooked decides who reads a booking or series in full: those who read
// everything, the booked user, the members of its project, and, for service time
// (maintenance, downtime), everyone who uses the instrument.
func (s *Server) mayReadBooked(ctx context.Context, userID, projectID string, kind scheduling.BookingKind) bool {
	me := principal(ctx)
	if me.CanReadEverything() || userID == me.UserID || kind == scheduling.KindService {
		return true
	}
	if projectID == "" {
		return false
	}
	p, err := s.store.Project(ctx, projectID)
	return err == nil && me.CanReadProject(p)
}

// changeableBooking loads a booking the caller may move or cancel: the booked user's
// own, or any for staff and managers.
func (s *Server) changeableBooking(ctx context.Context, id string) (scheduling.Booking, error) {
	b, err := s.visibleBooking(ctx, id)
	if err != nil {
		return b, err
	}
	me := principal(ctx)
	if !me.FacilityWide() && b.UserID != me.UserID {
		return b, beamledger.Forbidden("only the booked user, staff or a manager changes this booking")
	}
	if b.Kind == scheduling.KindService && !me.FacilityWide() {
		return b, beamledger.Forbidden("service bookings are changed by staff")
	}
	return b, nil
}

func (s *Server) handleBookingGet(c echo.Context) error {
	ctx := c.Request().Context()
	b, err := s.visibleBooking(ctx, c.Param("booking_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, bookingAnswer{Booking: b, Mine: b.UserID == principal(ctx).UserID})
}

type bookingMove struct {
	Start  string `json:"start"`
	End    string `json:"end"`
	Reason string `json:"reason"`
}

func (s *Server) handleBookingMove(c echo.Context) error {
	var in bookingMove
	if err := bind(c, &in); err != nil {
		return err
	}
	if len(in.Reason) > 1000 {
		return beamledger.InvalidField("reason", "is too long (at most 1000 characters)")
	}
	ctx := c.Request().Context()
	me := principal(ctx)
	cur, err := s.changeableBooking(ctx, c.Param("booking_id"))
	if err != nil {
		return err
	}
	start, end, res, err := s.parseRange(ctx, in.Start, in.End)
	if err != nil {
		return err
	}
	// A moved booking's charges must still have a valid account to go to.
	if err := s.store.CheckBookingFunding(ctx, cur.ProjectID, cur.ID, start, end); err != nil {
		return err
	}
	now := s.now()
	b, err := s.store.MoveBooking(ctx, cur.ID, start, end, me.ID(), strings.TrimSpace(in.Reason), now,
		func(b scheduling.Booking, bc scheduling.BookingContext) error {
			return scheduling.CheckBooking(scheduling.BookingCheck{
				Kind: b.Kind, Start: start, End: end, Now: now, Loc: bc.Location, Rules: bc.Rules,
				Qualification: bc.Qualification, ByStaff: me.FacilityWide(), StaffID: b.StaffID,
				PrimeUsedMinutes: bc.PrimeUsedMinutes,
			})
		})
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, bookingAnswer{Booking: b, Mine: b.UserID == me.UserID, Resolutions: res})
}

type reasonInput struct {
	Reason string `json:"reason"`
}

func (r *reasonInput) required() error {
	r.Reason = strings.TrimSpace(r.Reason)
	if r.Reason == "" || len(r.Reason) > 1000 {
		return beamledger.InvalidField("reason", "is required (at most 1000 characters)")
	}
	return nil
}

func (s *Server) handleBookingCancel(c echo.Context) error {
	var in reasonInput
	if err := bind(c, &in); err != nil {
		return err
	}
	if err := in.required(); err != nil {
		return err
	}
	ctx := c.Request().Context()
	cur, err := s.changeableBooking(ctx, c.Param("booking_id"))
	if err != nil {
		return err
	}
	b, err := s.store.CancelBooking(ctx, cur.ID, principal(ctx).ID(), in.Reason, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, bookingAnswer{Booking: b, Mine: b.UserID == principal(ctx).UserID})
}

func (s *Server) handleBookingEvents(c echo.Context) error {
	ctx := c.Request().Context()
	b, err := s.visibleBooking(ctx, c.Param("booking_id"))
	if err != nil {
		return err
	}
	evs, err := s.store.BookingEvents(ctx, b.ID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(evs))
}

// calendarSlot is a booking as the calendar shows it to someone who may not see its
// details: the range, the kind and whether it is theirs.
type calendarSlot struct {
	ID           string                 `json:"id"`
	InstrumentID string                 `json:"instrument_id"`
	Kind         scheduling.BookingKind `json:"kind"`
	Start        time.Time              `json:"start"`
	End          time.Time              `json:"end"`
	Mine         bool                   `json:"mine"`
	// Booking is the full record, present only when the caller may see it.
	Booking *scheduling.Booking `json:"booking,omitempty"`
}

// handleBookingList answers the calendar's range query: every active booking
// overlapping [from, to) (at most 62 days), with details only where the caller may see
// them.
func (s *Server) handleBookingList(c echo.Context) error {
	ctx := c.Request().Context()
	me := principal(ctx)
	f, err := bookingFilter(c)
	if err != nil {
		return err
	}
	if me.IsAgent() {
		if f.InstrumentID != "" && f.InstrumentID != me.InstrumentID {
			return beamledger.NotFound("instrument")
		}
		f.InstrumentID = me.InstrumentID
	}
	// Researchers may filter by themselves or their own projects only: filtering by
	// someone else would reveal whose slots are whose.
	if !me.IsAgent() && !me.CanReadEverything() {
		if f.UserID != "" && f.UserID != me.UserID {
			return beamledger.Forbidden("researchers filter the calendar by their own user id only")
		}
		if f.ProjectID != "" {
			if _, err := s.visibleProject(ctx, f.ProjectID); err != nil {
				return err
			}
		}
	}
	bs, err := s.store.Bookings(ctx, f)
	if err != nil {
		return err
	}
	mine, err := s.myProjects(ctx, me)
	if err != nil {
		return err
	}
	out := make([]calendarSlot, 0, len(bs))
	for i := range bs {
		b := &bs[i]
		slot := calendarSlot{ID: b.ID, InstrumentID: b.InstrumentID, Kind: b.Kind, Start: b.Start, End: b.End, Mine: !me.IsAgent() && b.UserID == me.UserID}
		if me.CanReadEverything() || me.IsAgent() || slot.Mine || mine[b.ProjectID] || b.Kind == scheduling.KindService {
			slot.Booking = b
		}
		out = append(out, slot)
	}
	return c.JSON(http.StatusOK, listOf(out))
}

func bookingFilter(c echo.Context) (scheduling.BookingFilter, error) {
	fe := beamledger.FieldErrors{}
	f := scheduling.BookingFilter{InstrumentID: c.QueryParam("instrument_id"), UserID: c.QueryParam("user_id"), ProjectID: c.QueryParam("project_id")}
	for name, v := range map[string]string{"instrument_id": f.InstrumentID, "user_id": f.UserID, "project_id": f.ProjectID} {
		if v != "" && !accounts.ValidID(v) {
			fe.Add(name, "must be an id")
		}
	}
	var err error
	if f.From, err = time.Parse(time.RFC3339, c.QueryParam("from")); err != nil {
		fe.Add("from", "is required: an RFC 3339 instant such as 2026-12-07T00:00:00Z")
	}
	if f.To, err = time.Parse(time.RFC3339, c.QueryParam("to")); err != nil {
		fe.Add("to", "is required: an RFC 3339 instant such as 2026-12-14T00:00:00Z")
	}
	if err := fe.Err(); err != nil {
		return f, err
	}
	if !f.To.After(f.From) || f.To.Sub(f.From) > 62*24*time.Hour {
		return f, beamledger.InvalidField("to", "must be after from, at most 62 days later")
	}
	return f, nil
}

// readableProjectIDs limits a listing to the caller's projects: nil (no limit) for
// those who read everything, the projects they belong to for everyone else.
func (s *Server) readableProjectIDs(ctx context.Context) ([]string, error) {
	me := principal(ctx)
	if me.CanReadEverything() {
		return nil, nil
	}
	mine, err := s.myProjects(ctx, me)
	if err != nil {
		return nil, err
	}
	ids := make([]string, 0, len(mine))
	for id := range mine {
		ids = append(ids, id)
	}
	return ids, nil
}

// myProjects is the set of project ids the caller belongs to.
func (s *Server) myProjects(ctx context.Context, me accounts.Principal) (map[string]bool, error) {
	out := map[string]bool{}
	if me.IsAgent() || me.CanReadEverything() {
		return out, nil
	}
	ps, err := s.store.Projects(ctx, accounts.ProjectFilter{MemberID: me.UserID})
	if err != nil {
		return nil, err
	}
	for _, p := range ps {
		out[p.ID] = true
	}
	return out, nil
}
