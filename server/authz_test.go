package server

import (
	"context"
	"encoding/json"
	"maps"
	"net/http"
	"net/url"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
)

// matrixPrincipals are the callers of the route matrix, in the order of an access row.
var matrixPrincipals = [...]string{"anonymous", "manager", "staff", "researcher", "auditor", "agent"}

// outcome is what one principal must get from one route.
type outcome int

const (
	// wAllow: neither 401, 403 nor 404 nor a 5xx; a read answers 2xx.
	wAllow outcome = iota + 1
	// wDeny: 403 forbidden.
	wDeny
	// wHidden: 404 not_found, the object being invisible to the principal.
	wHidden
	// wUnauth: 401 unauthorized, credentials being required.
	wUnauth
)

func (o outcome) String() string {
	return map[outcome]string{wAllow: "allow", wDeny: "deny", wHidden: "hidden", wUnauth: "unauth"}[o]
}

// access is one route's row: anonymous, manager, staff, researcher, auditor, agent.
type access [len(matrixPrincipals)]outcome

// routeExpectation is what the matrix expects of a route, and the body it sends
// (nil for none). Bodies are built per request, so a refresh token is fresh.
type routeExpectation struct {
	who  access
	body func(w *world) any
	// bodyAs, when set, builds the body for the principal named (one of
	// matrixPrincipals) in place of body.
	bodyAs func(w *world, who string) any
	// setup, when set, makes the objects the route needs in its fresh world and
	// returns the values of path parameters matrixPath has no default for.
	setup func(w *world) map[string]string
	// query, when set, is added to the path as its query string.
	query func(w *world) string
	// strict asks a 2xx of every allowed principal, writes included: the setup
	// leaves every allowed call able to succeed.
	strict bool
	// paramsAs, when set, gives path parameters for the principal named, over the
	// setup's: a fresh object for each caller of a route that uses it up.
	paramsAs func(w *world, who string) map[string]string
	// tus, when set, sends the request as a tus client does (Tus-Resumable, the
	// headers and raw body given) in place of a JSON body.
	tus func(w *world) (http.Header, []byte)
}

var (
	openToAll = access{wAllow, wAllow, wAllow, wAllow, wAllow, wAllow}
	// usersOnly is users(everyone...): any signed-in user, no agent.
	usersOnly = access{wUnauth, wAllow, wAllow, wAllow, wAllow, wDeny}
	// usersAndAgent is usersOrAgent(instrument:read, everyone...).
	usersAndAgent = access{wUnauth, wAllow, wAllow, wAllow, wAllow, wAllow}
	managerOnly   = access{wUnauth, wAllow, wDeny, wDeny, wDeny, wDeny}
	// pagesOnly is a web page: any signed-in person; agents are no page users.
	pagesOnly = access{wUnauth, wAllow, wAllow, wAllow, wAllow, wDeny}
	// readersPage is a page for those who read every project.
	readersPage = access{wUnauth, wAllow, wAllow, wDeny, wAllow, wDeny}
	// opsPage is a page for managers and staff.
	opsPage = access{wUnauth, wAllow, wAllow, wDeny, wDeny, wDeny}
	// csrfRefused is a browser form post sent without the page's CSRF token.
	csrfRefused = access{wDeny, wDeny, wDeny, wDeny, wDeny, wDeny}
	// uploadWriters is who reaches staff's resumable upload.
	uploadWriters = access{wUnauth, wAllow, wAllow, wHidden, wDeny, wHidden}
)

// routeMatrix holds the expected access of every route, with path parameters naming
// objects the researcher does not own (see matrixPath). A route registered without an
// entry here fails TestRouteRoleMatrix, and so does an entry with no route.
var routeMatrix = map[string]routeExpectation{
	"GET /healthz":          {who: openToAll},
	"GET /readyz":           {who: openToAll},
	"GET /api/openapi.json": {who: openToAll},
	"GET /static/*":         {who: openToAll},
	// Pages: people only; without the page's CSRF token the session posts refuse
	// everyone (the browser flow is in web/browsertest and exerciseWeb).
	"GET /":                 {who: pagesOnly},
	"GET /calendar":         {who: pagesOnly},
	"GET /acquire":          {who: pagesOnly},
	"GET /files":            {who: pagesOnly},
	"GET /trace":            {who: pagesOnly},
	"GET /statements":       {who: pagesOnly},
	"GET /reports":          {who: readersPage},
	"GET /ledger":           {who: pagesOnly},
	"GET /qualifications":   {who: opsPage},
	"GET /rates":            {who: pagesOnly},
	"GET /instruments":      {who: readersPage},
	"GET /people":           {who: readersPage},
	"GET /service":          {who: opsPage},
	"GET /signin":           {who: openToAll},
	"POST /signin":          {who: csrfRefused},
	"POST /signout":         {who: csrfRefused},
	"POST /session/refresh": {who: csrfRefused},

	"POST /api/v1/auth/login": {who: openToAll, body: func(w *world) any {
		return map[string]string{"email": w.users[accounts.RoleResearcher].Email, "password": testPassword}
	}},
	"POST /api/v1/auth/refresh": {who: openToAll, body: func(w *world) any {
		return map[string]string{"refresh_token": w.login(w.users[accounts.RoleStaff].Email, testPassword).RefreshToken}
	}},
	"POST /api/v1/auth/logout": {who: openToAll, body: func(w *world) any {
		return map[string]string{"refresh_token": w.login(w.users[accounts.RoleStaff].Email, testPassword).RefreshToken}
	}},

	"GET /api/v1/me": {who: usersOnly},
	"POST /api/v1/me/password": {who: usersOnly, body: func(*world) any {
		return map[string]string{"current_password": testPassword, "new_password": "a new and long passphrase"}
	}},
	"GET /api/v1/facility": {who: usersAndAgent},
	"PUT /api/v1/facility": {who: managerOnly, body: func(*world) any {
		return map[string]string{"name": "Renamed Facility", "time_zone": "Europe/Berlin", "currency": "EUR"}
	}},

	"GET /api/v1/users": {who: access{wUnauth, wAllow, wAllow, wDeny, wAllow, wDeny}},
	"POST /api/v1/users": {who: managerOnly, body: func(*world) any {
		return map[string]string{"email": "new@test.example", "display_name": "New User", "role": "researcher", "password": "a long enough password"}
	}},
	"GET /api/v1/users/:user_id": {who: access{wUnauth, wAllow, wAllow, wHidden, wAllow, wDeny}},
	// Staff and auditors read every user but change none; the researcher sees only themself.
	"PATCH /api/v1/users/:user_id": {who: access{wUnauth, wAllow, wDeny, wHidden, wDeny, wDeny}, body: func(*world) any {
		return map[string]string{"display_name": "Renamed"}
	}},
	"POST /api/v1/users/:user_id/password": {who: managerOnly, body: func(*world) any {
		return map[string]string{"new_password": "a reset passphrase of length"}
	}},

	"GET /api/v1/projects": {who: usersOnly},
	"POST /api/v1/projects": {who: managerOnly, body: func(w *world) any {
		return map[string]string{"code": "NEW-1", "title": "New project", "principal_investigator_id": w.users[accounts.RoleResearcher].ID, "rate_class": "internal"}
	}},
	"GET /api/v1/projects/:project_id": {who: access{wUnauth, wAllow, wAllow, wHidden, wAllow, wDeny}},
	"PATCH /api/v1/projects/:project_id": {who: managerOnly, body: func(*world) any {
		return map[string]string{"title": "Renamed project"}
	}},
	// Only a manager or the project's PI changes members; a foreign project is hidden.
	// The manager's removal of the PI is a 409, which is still "allowed".
	"PUT /api/v1/projects/:project_id/members/:user_id":    {who: access{wUnauth, wAllow, wDeny, wHidden, wDeny, wDeny}},
	"DELETE /api/v1/projects/:project_id/members/:user_id": {who: access{wUnauth, wAllow, wDeny, wHidden, wDeny, wDeny}},

	"GET /api/v1/instruments": {who: usersAndAgent},
	"POST /api/v1/instruments": {who: managerOnly, body: func(*world) any {
		return map[string]any{"code": "TEM-2", "name": "Second TEM", "kind": "tem", "accelerating_voltages_v": []float64{200e3}}
	}},
	"GET /api/v1/instruments/:instrument_id": {who: usersAndAgent},
	"PUT /api/v1/instruments/:instrument_id/condition-limits": {who: facilityOpsOnly, strict: true, body: func(*world) any {
		return map[string]any{"camera_length_min_m": 0.02, "camera_length_max_m": 2.5, "condition_checks": "warning"}
	}},
	"PUT /api/v1/instruments/:instrument_id/bookable": {who: managerOnly, strict: true, body: func(*world) any {
		return map[string]any{"bookable": true}
	}},
	"PUT /api/v1/instruments/:instrument_id/capabilities": {who: managerOnly, strict: true, body: func(w *world) any {
		return map[string]any{"name": w.instr.Name, "kind": w.instr.Kind, "location": w.instr.Location,
			"accelerating_voltages_v": w.instr.AcceleratingVoltagesV, "corrector": w.instr.Corrector, "detectors": w.instr.Detectors}
	}},
	"GET /api/v1/instruments/:instrument_id/agent-tokens": {who: access{wUnauth, wAllow, wAllow, wDeny, wDeny, wDeny}},
	"POST /api/v1/instruments/:instrument_id/agent-tokens": {who: managerOnly, body: func(*world) any {
		return map[string]any{"name": "second-pc", "scopes": []string{"instrument:read"}}
	}},
	"DELETE /api/v1/instruments/:instrument_id/agent-tokens/:token_id": {who: managerOnly},

	// Booking rules are read by everyone, and by an agent with instrument:read (the
	// instrument named is the agent's own); only managers change them, and the changes
	// sent leave valid rules, so the manager's call succeeds.
	"GET /api/v1/facility/booking-rules": {who: usersAndAgent},
	"PUT /api/v1/facility/booking-rules": {who: managerOnly, strict: true, body: func(*world) any {
		return map[string]any{"horizon_days": 60, "prime_time": []any{}}
	}},
	"GET /api/v1/instruments/:instrument_id/booking-rules": {who: usersAndAgent},
	"PUT /api/v1/instruments/:instrument_id/booking-rules": {who: managerOnly, strict: true, body: func(*world) any {
		return map[string]any{"slot_minutes": 60}
	}},
	// The quotas asked for are the foreign project's: hidden from the researcher,
	// readable by staff and the auditor. Only managers set quotas.
	"GET /api/v1/quotas": {who: access{wUnauth, wAllow, wAllow, wHidden, wAllow, wDeny}, setup: matrixQuota, query: func(w *world) string {
		return "project_id=" + w.foreign.ID
	}},
	"PUT /api/v1/quotas": {who: managerOnly, strict: true, body: func(w *world) any {
		return scheduling.Quota{ProjectID: w.foreign.ID, InstrumentID: w.instr.ID, Period: scheduling.PeriodMonth, AllocatedMinutes: 600}
	}},
	// Every user reads the report (a researcher only their projects' lines); no agent.
	"GET /api/v1/reports/fair-share": {who: usersOnly, setup: matrixQuota, query: func(*world) string { return "period=week" }},

	// Researchers see only their own qualifications; agents none.
	"GET /api/v1/qualifications": {who: usersOnly},
	"POST /api/v1/instruments/:instrument_id/qualifications": {who: facilityOpsOnly, strict: true, body: func(w *world) any {
		return map[string]any{"user_id": w.other.ID, "level": "independent", "reason": "trained by the facility"}
	}},
	// The second allowed caller (staff, after the manager) finds the qualification
	// revoked already: 409, past the access check.
	"POST /api/v1/qualifications/:qualification_id/revoke": {who: facilityOpsOnly, setup: matrixQualification, body: func(*world) any {
		return map[string]string{"reason": "left the group"}
	}},

	// The booking named is w.other's in the foreign project: hidden from the researcher,
	// readable by the auditor, changeable by staff and managers only. An agent with
	// instrument:read reads its instrument's calendar and nothing else.
	"GET /api/v1/bookings": {who: usersAndAgent, setup: matrixBooking, query: func(w *world) string {
		_, q, _ := strings.Cut(calendarPath(w), "?")
		return q
	}},
	// A researcher booking for themself in a foreign project finds no such project;
	// staff and managers book w.other there, each at another time.
	"POST /api/v1/bookings": {who: bookers, strict: true, setup: matrixQualified, bodyAs: func(w *world, who string) any {
		start := w.nextTuesday(map[string]int{"manager": 8, "staff": 11, "researcher": 14}[who], 0)
		b := w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent)
		b["project_id"] = w.foreign.ID
		if who != "researcher" {
			b["user_id"] = w.other.ID
		}
		return b
	}},
	"GET /api/v1/bookings/:booking_id": {who: bookingReaders, setup: matrixBooking},
	"PATCH /api/v1/bookings/:booking_id": {who: bookers, strict: true, setup: matrixBooking, body: func(w *world) any {
		start := w.nextTuesday(13, 0)
		return map[string]string{"start": start.Format(time.RFC3339), "end": start.Add(2 * time.Hour).Format(time.RFC3339), "reason": "moved by the facility"}
	}},
	// The staff member, after the manager, finds the booking cancelled already: 409.
	"POST /api/v1/bookings/:booking_id/cancel": {who: bookers, setup: matrixBooking, body: func(*world) any {
		return map[string]string{"reason": "instrument fault"}
	}},
	"GET /api/v1/bookings/:booking_id/events": {who: bookingReaders, setup: matrixBooking},

	// The series named is w.other's weekly series in the foreign project, made by
	// staff: hidden from the researcher, readable by the auditor, cancelled by staff
	// and managers only. A researcher asking for a series in a foreign project finds
	// no such project; staff and managers book w.other there, each at another time.
	"POST /api/v1/series": {who: bookers, strict: true, setup: matrixQualified, bodyAs: func(w *world, who string) any {
		start := w.nextTuesday(map[string]int{"manager": 8, "staff": 11, "researcher": 14}[who], 0)
		b := matrixSeriesBody(w, start)
		if who == "researcher" {
			delete(b, "user_id")
		}
		return b
	}},
	"GET /api/v1/series/:series_id": {who: bookingReaders, setup: matrixSeries},
	// The staff member, after the manager, finds nothing left to cancel: 200, no items.
	"POST /api/v1/series/:series_id/cancel": {who: bookers, strict: true, setup: matrixSeries, body: func(*world) any {
		return map[string]string{"reason": "instrument fault"}
	}},

	// The entry named is w.other's in the foreign project, made by staff while the
	// matrix booking holds its range: hidden from the researcher (who lists only their
	// own entries), listed for the auditor, withdrawn or accepted by staff and managers
	// only. A researcher waiting in a foreign project finds no such project; staff and
	// managers make w.other an entry there, each for another part of the booked range.
	"GET /api/v1/waitlist": {who: usersOnly, setup: matrixWaitlistEntry},
	"POST /api/v1/waitlist": {who: bookers, strict: true, setup: matrixBooking, bodyAs: func(w *world, who string) any {
		start := w.nextTuesday(map[string]int{"manager": 9, "staff": 10, "researcher": 9}[who], 0)
		b := w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent)
		b["project_id"] = w.foreign.ID
		if who != "researcher" {
			b["user_id"] = w.other.ID
		}
		return b
	}},
	// The staff member, after the manager, finds the entry withdrawn already: 409.
	"POST /api/v1/waitlist/:entry_id/withdraw": {who: bookers, setup: matrixWaitlistEntry},
	// The entry is on offer, its booking cancelled; the staff member, after the
	// manager, finds it booked already: 409.
	"POST /api/v1/waitlist/:entry_id/accept": {who: bookers, setup: matrixOfferedEntry},

	// Usage is recorded by the booked user, staff, managers and the instrument's agent
	// (usage:write); the auditor reads it but records none. The matrix's agent holds
	// every scope on the booking's instrument. Check-in: the staff member and the
	// agent, after the manager, find the booking checked in already: 409. Check-out:
	// the booking was checked in ten minutes ago; after the manager checks it out,
	// staff and the agent find it not checked in: 409.
	"POST /api/v1/bookings/:booking_id/check-in":  {who: usageRecorders, setup: matrixBooking},
	"POST /api/v1/bookings/:booking_id/check-out": {who: usageRecorders, setup: matrixCheckedIn},
	"GET /api/v1/bookings/:booking_id/usage":      {who: access{wUnauth, wAllow, wAllow, wHidden, wAllow, wAllow}, setup: matrixCheckedIn},

	// Derived quantities are computed for any signed-in user and for an agent with
	// acquisition:write; only managers change the regime thresholds.
	"POST /api/v1/derive": {who: access{wUnauth, wAllow, wAllow, wAllow, wAllow, wAllow}, strict: true, body: func(*world) any {
		return map[string]any{"accelerating_voltage": "300 kV", "convergence_semiangle": "25 mrad"}
	}},
	"GET /api/v1/facility/optics-settings": {who: usersAndAgent},
	"PUT /api/v1/facility/optics-settings": {who: managerOnly, strict: true, body: func(*world) any {
		return map[string]any{"abf_inner_fraction": 0.4, "haadf_inner_multiple": 3, "haadf_inner_min_rad": 0.06}
	}},
	// Specimens belong to projects: the one named is the foreign project's, and a
	// researcher registering one there finds no such project.
	"GET /api/v1/specimens": {who: usersOnly},
	"POST /api/v1/specimens": {who: bookers, strict: true, bodyAs: func(w *world, who string) any {
		return map[string]any{"project_id": w.foreign.ID, "code": "S-" + who, "fluence_budget_e_per_angstrom2": 1e4}
	}},
	"GET /api/v1/specimens/:specimen_id": {who: bookingReaders, setup: matrixSpecimen},
	// Tunings are recorded by staff, managers and the instrument's agent (correctors
	// measure themselves); calibrations by staff and managers. Everyone reads both.
	"GET /api/v1/instruments/:instrument_id/tunings": {who: usersAndAgent},
	"POST /api/v1/instruments/:instrument_id/tunings": {who: access{wUnauth, wAllow, wAllow, wDeny, wDeny, wAllow}, strict: true, body: func(w *world) any {
		return map[string]any{"measured_at": w.clock.Now().Add(-time.Hour), "coefficients": map[string]string{"C3": "1.2 µm"}}
	}},
	"GET /api/v1/tunings/:tuning_id":                      {who: usersOnly, setup: matrixTuning},
	"GET /api/v1/instruments/:instrument_id/calibrations": {who: usersAndAgent},
	"POST /api/v1/instruments/:instrument_id/calibrations": {who: facilityOpsOnly, strict: true, body: func(w *world) any {
		return map[string]any{"kind": "pixel_size", "effective_from": w.clock.Now().Add(-time.Hour), "magnification": 1e6, "pixel_size": "12 pm"}
	}},
	// The acquisitions named are on w.other's booking in the foreign project: hidden
	// from the researcher, readable by the auditor, recorded by staff, managers and
	// the instrument's agent, corrected by staff and managers.
	"GET /api/v1/acquisitions": {who: usersOnly},
	"POST /api/v1/acquisitions": {who: access{wUnauth, wAllow, wAllow, wHidden, wDeny, wAllow}, strict: true, setup: matrixPastBooking, bodyAs: func(w *world, _ string) any {
		return matrixAcquisitionBody(w)
	}},
	"GET /api/v1/acquisitions/:acquisition_id":          {who: bookingReaders, setup: matrixAcquisition},
	"GET /api/v1/acquisitions/:acquisition_id/versions": {who: bookingReaders, setup: matrixAcquisition},
	"POST /api/v1/acquisitions/:acquisition_id/corrections": {who: bookers, strict: true, setup: matrixAcquisition, body: func(w *world) any {
		b := matrixAcquisitionBody(w)
		delete(b, "booking_id")
		b["reason"] = "beam current was 40 pA"
		return b
	}},

	// Data files: the file named is in the foreign project, on w.other's acquisition:
	// hidden from the researcher, readable by the auditor. Staff, managers and the
	// instrument's agent add files to the acquisition (the same bytes again answer
	// 200 with the record already there); the auditor adds none.
	"POST /api/v1/files": {who: access{wUnauth, wAllow, wAllow, wHidden, wDeny, wAllow}, strict: true, setup: matrixAcquisition,
		query: func(w *world) string { return "acquisition_id=" + matrixAcquisitionID(w) + "&name=frame.json" },
		body:  func(*world) any { return map[string]int{"frame": 1} }},
	"GET /api/v1/files":                  {who: usersOnly},
	"GET /api/v1/files/:file_id":         {who: bookingReaders, setup: matrixFile},
	"GET /api/v1/files/:file_id/content": {who: bookingReaders, setup: matrixFile},
	"GET /api/v1/files/:file_id/lineage": {who: bookingReaders, setup: matrixFile},
	// The second allowed caller (staff, after the manager) finds the output's step
	// recorded already: 409, past the access check.
	"POST /api/v1/derivations": {who: bookers, setup: matrixFile, body: func(w *world) any {
		return map[string]any{"output_file_id": matrixProcessedFile(w), "input_file_ids": []string{matrixFileID(w)},
			"software": "drift-align", "software_version": "2.3.1", "performed_at": w.clock.Now()}
	}},

	// Resumable uploads: begun by those who may add files (as POST /api/v1/files),
	// then the creator's (here staff's) and managers'. The researcher and the agent
	// do not see staff's upload; the auditor adds no files. OPTIONS is open.
	"OPTIONS /api/v1/uploads": {who: openToAll, strict: true, tus: func(*world) (http.Header, []byte) { return nil, nil }},
	"POST /api/v1/uploads": {who: access{wUnauth, wAllow, wAllow, wHidden, wDeny, wAllow}, strict: true, setup: matrixAcquisition,
		tus: func(w *world) (http.Header, []byte) {
			return http.Header{"Upload-Length": {"12"}, "Upload-Metadata": {tusMetadata("filename", "frame.raw", "acquisition_id", matrixAcquisitionID(w))}}, nil
		}},
	"HEAD /api/v1/uploads/:upload_id": {who: uploadWriters, strict: true, setup: matrixUpload, tus: func(*world) (http.Header, []byte) { return nil, nil }},
	// The manager sends the first bytes; staff, second, is at the wrong offset (409).
	"PATCH /api/v1/uploads/:upload_id": {who: uploadWriters, setup: matrixUpload, tus: func(*world) (http.Header, []byte) {
		return http.Header{"Upload-Offset": {"0"}}, []byte("fram")
	}},
	"DELETE /api/v1/uploads/:upload_id": {who: uploadWriters, strict: true, setup: matrixUpload, tus: func(*world) (http.Header, []byte) { return nil, nil },
		paramsAs: func(w *world, _ string) map[string]string { return matrixUpload(w) }},

	// The ledger's head, key, checkpoints and proofs are public; its events (records
	// of every project) are for managers, staff and auditors; only managers sign a
	// checkpoint on demand. The matrix's specimen gives the ledger an event.
	"GET /api/v1/ledger":                    {who: openToAll},
	"GET /api/v1/ledger/key":                {who: openToAll},
	"GET /api/v1/ledger/checkpoint":         {who: openToAll, setup: matrixSealed},
	"GET /api/v1/ledger/checkpoints":        {who: openToAll, setup: matrixSealed},
	"POST /api/v1/ledger/checkpoints":       {who: access{wUnauth, wAllow, wDeny, wDeny, wDeny, wDeny}, strict: true, setup: matrixSealed},
	"GET /api/v1/ledger/proofs/inclusion":   {who: openToAll, setup: matrixSealed, query: func(*world) string { return "index=0&size=1" }},
	"GET /api/v1/ledger/proofs/consistency": {who: openToAll, setup: matrixSealed, query: func(*world) string { return "from=1&to=1" }},
	"GET /api/v1/ledger/events/:index": {who: access{wUnauth, wAllow, wAllow, wDeny, wAllow, wDeny}, setup: func(w *world) map[string]string {
		matrixSealed(w)
		return map[string]string{":index": "0"}
	}},
	"GET /api/v1/ledger/entities/:entity_type/:entity_id/events": {who: access{wUnauth, wAllow, wAllow, wDeny, wAllow, wDeny}, setup: func(w *world) map[string]string {
		extra := matrixSpecimen(w)
		return map[string]string{":entity_type": "specimen", ":entity_id": extra[":specimen_id"]}
	}},

	// Traces of the matrix's file (on the foreign project's acquisition): hidden from
	// the researcher, read by those who read everything, not by the agent. The POST
	// sends the file's own bytes (the JSON of the body).
	"GET /api/v1/trace/:sha256":        {who: bookingReaders, setup: matrixTrace},
	"POST /api/v1/trace":               {who: bookingReaders, setup: matrixTrace, body: func(*world) any { return matrixTraceBody }},
	"GET /api/v1/trace/:sha256/prov":   {who: bookingReaders, setup: matrixTrace},
	"GET /api/v1/trace/:sha256/bundle": {who: bookingReaders, setup: matrixTrace},

	// Feed tokens are each person's own: a manager neither sees nor revokes anyone
	// else's, and the token named here is the researcher's.
	"GET /api/v1/me/feed-tokens":                   {who: usersOnly},
	"POST /api/v1/me/feed-tokens":                  {who: usersOnly, strict: true},
	"DELETE /api/v1/me/feed-tokens/:feed_token_id": {who: access{wUnauth, wHidden, wHidden, wAllow, wHidden, wDeny}, setup: matrixFeedToken},
	// The feeds ignore the Authorization header: the researcher's feed token in the
	// path is the credential, whoever calls.
	"GET /feeds/:feed_token/mine.ics": {who: openToAll, setup: matrixFeedToken},
	"GET /feeds/:feed_token/instruments/:instrument_id": {who: openToAll, setup: func(w *world) map[string]string {
		extra := matrixFeedToken(w)
		maps.Copy(extra, matrixBooking(w))
		extra[":instrument_id"] = w.instr.ID + ".ics"
		return extra
	}},

	// Cost recovery (helpers in billing_matrix_test.go): managers write; every user
	// reads rates and policy; staff and auditors read every project's accounts and
	// statements, the researcher none of the foreign project's; the reports are for
	// managers, staff and auditors.
	"GET /api/v1/instruments/:instrument_id/rate-schedules": {who: usersOnly},
	"POST /api/v1/instruments/:instrument_id/rate-schedules": {who: managerOnly, strict: true, body: func(w *world) any {
		return refRateBody(w.clock.Now().Add(24 * time.Hour))
	}},
	"GET /api/v1/facility/billing-policy":                   {who: usersOnly},
	"PUT /api/v1/facility/billing-policy":                   {who: managerOnly, strict: true, body: func(*world) any { return map[string]any{"unattended_cap_minor": 40000} }},
	"GET /api/v1/instruments/:instrument_id/billing-policy": {who: usersOnly},
	"PUT /api/v1/instruments/:instrument_id/billing-policy": {who: managerOnly, strict: true, body: func(*world) any { return map[string]any{"minimum_minutes": 30} }},
	"GET /api/v1/projects/:project_id/funding-accounts":     {who: bookingReaders},
	"POST /api/v1/projects/:project_id/funding-accounts": {who: managerOnly, strict: true, body: func(*world) any {
		return map[string]any{"code": "GRANT-9"}
	}},
	"PATCH /api/v1/funding-accounts/:account_id": {who: managerOnly, strict: true, setup: matrixFundingAccount, body: func(*world) any {
		return map[string]any{"cap_minor": 100000}
	}},
	"GET /api/v1/projects/:project_id/funding": {who: bookingReaders},
	"PUT /api/v1/projects/:project_id/funding": {who: managerOnly, strict: true, setup: matrixFundingAccount, body: matrixFundingBody},
	"GET /api/v1/bookings/:booking_id/funding": {who: bookingReaders, setup: matrixBooking},
	"PUT /api/v1/bookings/:booking_id/funding": {who: managerOnly, strict: true, setup: func(w *world) map[string]string {
		extra := matrixBooking(w)
		maps.Copy(extra, matrixFundingAccount(w))
		return extra
	}, body: matrixFundingBody},
	"GET /api/v1/projects/:project_id/statements": {who: bookingReaders, setup: matrixStatement},
	"POST /api/v1/projects/:project_id/statements": {who: managerOnly, strict: true, setup: matrixFundingAccount, body: func(*world) any {
		return map[string]string{"month": "2026-01"}
	}},
	"GET /api/v1/statements/:statement_id":        {who: bookingReaders, setup: matrixStatement},
	"POST /api/v1/statements/:statement_id/issue": {who: managerOnly, strict: true, setup: matrixStatement},
	"POST /api/v1/projects/:project_id/adjustments": {who: managerOnly, strict: true, setup: matrixFundingAccount, body: func(w *world) any {
		b := matrixFundingBody(w).(map[string]any)
		b["amount_minor"], b["reason"] = -500, "goodwill credit"
		return b
	}},
	"POST /api/v1/rate-calculations": {who: managerOnly, strict: true, body: func(*world) any { return refRateInputs() }},
	"POST /api/v1/cost-entries": {who: managerOnly, strict: true, body: func(w *world) any {
		return map[string]any{"instrument_id": w.instr.ID, "fiscal_year": 2026, "category": "service_contract", "amount_minor": 9600000}
	}},
	"GET /api/v1/reports/recovery": {who: access{wUnauth, wAllow, wAllow, wDeny, wAllow, wDeny}, query: func(*world) string { return "fiscal_year=2026" }},
	"GET /api/v1/reports/utilization": {who: access{wUnauth, wAllow, wAllow, wDeny, wAllow, wDeny}, query: func(w *world) string {
		return "instrument_id=" + w.instr.ID + "&from=2026-03-01&to=2026-04-01"
	}},
	"GET /api/v1/reports/facility-utilization": {who: access{wUnauth, wAllow, wAllow, wDeny, wAllow, wDeny}, query: func(*world) string {
		return "from=2026-03-01&to=2026-04-01"
	}},
}

var (
	// facilityOpsOnly is users(facilityOps...): managers and staff.
	facilityOpsOnly = access{wUnauth, wAllow, wAllow, wDeny, wDeny, wDeny}
	// bookers may book and change bookings; the matrix's booking is foreign to the researcher.
	bookers = access{wUnauth, wAllow, wAllow, wHidden, wDeny, wDeny}
	// bookingReaders read a booking; the matrix's booking is foreign to the researcher.
	bookingReaders = access{wUnauth, wAllow, wAllow, wHidden, wAllow, wDeny}
	// usageRecorders check the matrix's booking in and out: not the auditor, and not
	// the researcher, to whom the booking is foreign.
	usageRecorders = access{wUnauth, wAllow, wAllow, wHidden, wDeny, wAllow}
)

// matrixQualified qualifies w.other, the foreign project's researcher, on w.instr.
func matrixQualified(w *world) map[string]string {
	w.qualify(w.other.ID, scheduling.LevelIndependent)
	return nil
}

// matrixQuota gives the foreign project a weekly quota on w.instr, so that the quota
// routes have something of it to show or hide.
func matrixQuota(w *world) map[string]string {
	q := scheduling.Quota{ProjectID: w.foreign.ID, InstrumentID: w.instr.ID, Period: scheduling.PeriodWeek, AllocatedMinutes: 600}
	if _, err := w.db.SetQuota(context.Background(), q); err != nil {
		w.t.Fatal(err)
	}
	return nil
}

// matrixQualification is a qualification of w.other, who is not the researcher.
func matrixQualification(w *world) map[string]string {
	q, err := w.db.GrantQualification(context.Background(), scheduling.NewQualification{
		UserID: w.other.ID, InstrumentID: w.instr.ID, Level: scheduling.LevelSupervised, Reason: "matrix grant", GrantedBy: w.users[accounts.RoleStaff].ID,
	}, w.clock.Now())
	if err != nil {
		w.t.Fatal(err)
	}
	return map[string]string{":qualification_id": q.ID}
}

// matrixBooking is w.other's booking in the foreign project, made by staff and
// checked against the booking rules as any booking is.
func matrixBooking(w *world) map[string]string {
	matrixQualified(w)
	start := w.nextTuesday(9, 0)
	body := w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent)
	body["project_id"], body["user_id"] = w.foreign.ID, w.other.ID
	var b bookingAnswer
	if r := w.do(http.MethodPost, "/api/v1/bookings", w.tokens[accounts.RoleStaff], body, &b); r.StatusCode != http.StatusCreated {
		w.t.Fatalf("matrix booking: %d %s", r.StatusCode, r.Body)
	}
	return map[string]string{":booking_id": b.ID}
}

// matrixSeriesBody asks for two weekly two-hour bookings of w.other in the foreign
// project, the first at start.
func matrixSeriesBody(w *world, start time.Time) map[string]any {
	return map[string]any{"instrument_id": w.instr.ID, "project_id": w.foreign.ID, "user_id": w.other.ID, "kind": "independent",
		"rrule": "FREQ=WEEKLY;COUNT=2;BYDAY=TU", "start": start.In(berlin).Format("2006-01-02T15:04"), "duration_minutes": 120}
}

// matrixSeries is w.other's weekly series in the foreign project, made by staff and
// checked against the booking rules as any series is.
func matrixSeries(w *world) map[string]string {
	matrixQualified(w)
	var res scheduling.SeriesResult
	if r := w.do(http.MethodPost, "/api/v1/series", w.tokens[accounts.RoleStaff], matrixSeriesBody(w, w.nextTuesday(9, 0)), &res); r.StatusCode != http.StatusCreated || len(res.Booked) != 2 {
		w.t.Fatalf("matrix series: %d %s", r.StatusCode, r.Body)
	}
	return map[string]string{":series_id": res.Series.ID}
}

// matrixWaitlistEntry is w.other's waitlist entry in the foreign project for the range
// of matrixBooking, which it returns too, made by staff.
func matrixWaitlistEntry(w *world) map[string]string {
	extra := matrixBooking(w)
	start := w.nextTuesday(9, 0)
	body := w.bookingBody(start, start.Add(2*time.Hour), scheduling.KindIndependent)
	body["project_id"], body["user_id"] = w.foreign.ID, w.other.ID
	var e scheduling.WaitlistEntry
	if r := w.do(http.MethodPost, "/api/v1/waitlist", w.tokens[accounts.RoleStaff], body, &e); r.StatusCode != http.StatusCreated {
		w.t.Fatalf("matrix waitlist entry: %d %s", r.StatusCode, r.Body)
	}
	extra[":entry_id"] = e.ID
	return extra
}

// matrixOfferedEntry is matrixWaitlistEntry on offer: staff cancelled the booking it
// waited for.
func matrixOfferedEntry(w *world) map[string]string {
	extra := matrixWaitlistEntry(w)
	cancel := "/api/v1/bookings/" + extra[":booking_id"] + "/cancel"
	if r := w.do(http.MethodPost, cancel, w.tokens[accounts.RoleStaff], map[string]string{"reason": "matrix offer"}, nil); r.StatusCode != http.StatusOK {
		w.t.Fatalf("cancelling the matrix booking: %d %s", r.StatusCode, r.Body)
	}
	if e, err := w.db.WaitlistEntry(context.Background(), extra[":entry_id"]); err != nil || e.Status != scheduling.WaitlistOffered {
		w.t.Fatalf("matrix waitlist entry after the cancellation: %+v %v", e, err)
	}
	return extra
}

// matrixCheckedIn is matrixBooking with a usage opened ten minutes ago by staff.
func matrixCheckedIn(w *world) map[string]string {
	extra := matrixBooking(w)
	_, err := w.db.CheckIn(context.Background(), extra[":booking_id"], w.clock.Now().Add(-10*time.Minute),
		w.users[accounts.RoleStaff].ID, scheduling.SourceStaff)
	if err != nil {
		w.t.Fatal(err)
	}
	return extra
}

// matrixFeedToken is a calendar-feed token of the researcher: its id and its secret.
func matrixFeedToken(w *world) map[string]string {
	var f feedTokenCreated
	if r := w.do(http.MethodPost, "/api/v1/me/feed-tokens", w.tokens[accounts.RoleResearcher], nil, &f); r.StatusCode != http.StatusCreated {
		w.t.Fatalf("matrix feed token: %d %s", r.StatusCode, r.Body)
	}
	return map[string]string{":feed_token_id": f.ID, ":feed_token": f.Token}
}

// matrixSpecimen is a specimen of the foreign project.
func matrixSpecimen(w *world) map[string]string {
	sp, err := w.db.CreateSpecimen(context.Background(), provenance.NewSpecimen{ProjectID: w.foreign.ID, Code: "M-1", CreatedBy: w.other.ID}, w.clock.Now())
	if err != nil {
		w.t.Fatal(err)
	}
	return map[string]string{":specimen_id": sp.ID}
}

// matrixTuning is a tuning of w.instr recorded by staff.
func matrixTuning(w *world) map[string]string {
	tu, err := w.db.RecordTuning(context.Background(), provenance.NewTuning{InstrumentID: w.instr.ID, MeasuredAt: w.clock.Now().Add(-time.Hour),
		Coefficients: []provenance.Coefficient{{Name: "C3", Order: 3, MagnitudeM: 1e-6, Text: "1 µm"}}, RecordedBy: w.users[accounts.RoleStaff].ID}, w.clock.Now())
	if err != nil {
		w.t.Fatal(err)
	}
	return map[string]string{":tuning_id": tu.ID}
}

// matrixPastBooking is w.other's booking in the foreign project on w.instr, begun
// three hours ago, for acquisitions to be recorded on.
func matrixPastBooking(w *world) map[string]string {
	id, _ := w.pastBooking(w.instr.ID, w.foreign.ID, w.other.ID)
	return map[string]string{":booking_id": id}
}

// matrixAcquisitionBody records an hour of work on the matrix's past booking.
func matrixAcquisitionBody(w *world) map[string]any {
	now := w.clock.Now()
	bs, err := w.db.Bookings(context.Background(), scheduling.BookingFilter{InstrumentID: w.instr.ID, From: now.Add(-2 * time.Hour), To: now})
	if err != nil || len(bs) != 1 {
		w.t.Fatalf("the matrix's past booking: %v %v", bs, err)
	}
	return map[string]any{"booking_id": bs[0].ID, "started_at": now.Add(-2 * time.Hour), "ended_at": now.Add(-time.Hour),
		"conditions": map[string]any{"accelerating_voltage": "300 kV", "beam_current": "50 pA"}}
}

// matrixAcquisition is an acquisition on the matrix's past booking, recorded by staff.
func matrixAcquisition(w *world) map[string]string {
	extra := matrixPastBooking(w)
	var a provenance.Acquisition
	if r := w.do(http.MethodPost, "/api/v1/acquisitions", w.tokens[accounts.RoleStaff], matrixAcquisitionBody(w), &a); r.StatusCode != http.StatusCreated {
		w.t.Fatalf("matrix acquisition: %d %s", r.StatusCode, r.Body)
	}
	extra[":acquisition_id"] = a.ID
	return extra
}

// matrixAcquisitionID is the one acquisition matrixAcquisition made.
func matrixAcquisitionID(w *world) string {
	as, err := w.db.Acquisitions(context.Background(), provenance.AcquisitionFilter{ProjectID: w.foreign.ID})
	if err != nil || len(as) != 1 {
		w.t.Fatalf("the matrix acquisition: %v %v", as, err)
	}
	return as[0].ID
}

// matrixFile is a data file on the matrix's acquisition, uploaded by staff.
func matrixFile(w *world) map[string]string {
	extra := matrixAcquisition(w)
	var f provenance.DataFile
	if r := w.upload("/api/v1/files?acquisition_id="+extra[":acquisition_id"]+"&name=frame.raw", w.tokens[accounts.RoleStaff], []byte("matrix frame"), nil, &f); r.StatusCode != http.StatusCreated {
		w.t.Fatalf("matrix file: %d %s", r.StatusCode, r.Body)
	}
	extra[":file_id"] = f.ID
	return extra
}

// matrixFileID is the data file matrixFile made.
func matrixFileID(w *world) string {
	fs, err := w.db.DataFiles(context.Background(), provenance.FileFilter{AcquisitionID: matrixAcquisitionID(w)})
	if err != nil || len(fs) != 1 {
		w.t.Fatalf("the matrix file: %v %v", fs, err)
	}
	return fs[0].ID
}

// matrixProcessedFile is a processed file of the foreign project, made once by staff.
func matrixProcessedFile(w *world) string {
	var f provenance.DataFile
	r := w.upload("/api/v1/files?project_id="+w.foreign.ID+"&name=aligned.tif", w.tokens[accounts.RoleStaff], []byte("aligned"), nil, &f)
	if r.StatusCode/100 != 2 {
		w.t.Fatalf("matrix processed file: %d %s", r.StatusCode, r.Body)
	}
	return f.ID
}

// matrixUpload is a resumable upload of 12 bytes begun by staff on the matrix's
// acquisition (made on first use).
func matrixUpload(w *world) map[string]string {
	as, err := w.db.Acquisitions(context.Background(), provenance.AcquisitionFilter{ProjectID: w.foreign.ID})
	if err != nil {
		w.t.Fatal(err)
	}
	extra := map[string]string{}
	if len(as) == 0 {
		extra = matrixAcquisition(w)
	}
	path, _ := w.createUpload(w.tokens[accounts.RoleStaff], 12, "filename", "frame.raw", "acquisition_id", matrixAcquisitionID(w))
	extra[":upload_id"] = strings.TrimPrefix(path, "/api/v1/uploads/")
	return extra
}

// matrixSealed gives the ledger one sealed event (the foreign project's specimen) and
// its signed checkpoint.
func matrixSealed(w *world) map[string]string {
	extra := matrixSpecimen(w)
	if _, err := w.srv.signCheckpoint(context.Background()); err != nil {
		w.t.Fatal(err)
	}
	return extra
}

// matrixTraceBody is the matrix trace file's content, sent as JSON.
var matrixTraceBody = map[string]int{"traced": 1}

// matrixTrace is a file on the matrix's acquisition whose bytes are the JSON of
// matrixTraceBody, uploaded by staff, with its ledger event under a signed checkpoint.
func matrixTrace(w *world) map[string]string {
	extra := matrixAcquisition(w)
	body, _ := json.Marshal(matrixTraceBody)
	var f provenance.DataFile
	if r := w.upload("/api/v1/files?acquisition_id="+extra[":acquisition_id"]+"&name=traced.json", w.tokens[accounts.RoleStaff], body, nil, &f); r.StatusCode != http.StatusCreated {
		w.t.Fatalf("matrix trace file: %d %s", r.StatusCode, r.Body)
	}
	if _, err := w.srv.signCheckpoint(context.Background()); err != nil {
		w.t.Fatal(err)
	}
	extra[":sha256"] = f.SHA256
	return extra
}

// matrixPath fills a route's parameters with objects the researcher does not own;
// extra gives the ones a route's setup made.
func matrixPath(t *testing.T, w *world, route string, extra map[string]string) string {
	t.Helper()
	params := map[string]string{
		":project_id":    w.foreign.ID,
		":user_id":       w.other.ID,
		":instrument_id": w.instr.ID,
		":token_id":      w.agentID,
		"*":              "beamledger.css",
	}
	maps.Copy(params, extra)
	segs := strings.Split(route, "/")
	for i, s := range segs {
		if s == "*" || strings.HasPrefix(s, ":") {
			v, ok := params[s]
			if !ok {
				t.Fatalf("route %s: no value for parameter %s; add one to matrixPath", route, s)
			}
			segs[i] = v
		}
	}
	return strings.Join(segs, "/")
}

func (w *world) matrixToken(principal int) string {
	switch p := matrixPrincipals[principal]; p {
	case "anonymous":
		return ""
	case "agent":
		return w.agent
	default:
		return w.tokens[accounts.Role(p)]
	}
}

// checkOutcome fails the test when res is not what o asks for. A strict allow asks
// for a 2xx whatever the method.
func checkOutcome(t *testing.T, method string, o outcome, strict bool, res response) {
	t.Helper()
	code := res.errorCode()
	if method == http.MethodHead { // no body: the status alone speaks
		code = map[int]string{401: "unauthorized", 403: "forbidden", 404: "not_found"}[res.StatusCode]
	}
	switch o {
	case wAllow:
		bad := res.StatusCode == 401 || res.StatusCode == 403 || res.StatusCode == 404 || res.StatusCode >= 500
		if bad || ((strict || method == http.MethodGet) && res.StatusCode/100 != 2) {
			t.Errorf("allow: got %d %s", res.StatusCode, res.Body)
		}
	case wDeny:
		if res.StatusCode != 403 || code != "forbidden" {
			t.Errorf("deny: got %d %s, want 403 forbidden", res.StatusCode, res.Body)
		}
	case wHidden:
		if res.StatusCode != 404 || code != "not_found" {
			t.Errorf("hidden: got %d %s, want 404 not_found", res.StatusCode, res.Body)
		}
	case wUnauth:
		if res.StatusCode != 401 || code != "unauthorized" {
			t.Errorf("unauth: got %d %s, want 401 unauthorized", res.StatusCode, res.Body)
		}
	default:
		t.Errorf("no outcome set")
	}
}

// TestRouteRoleMatrix calls every registered route as every principal. Each route
// gets a fresh world, and within a route the refusals run before the successes, so
// a write that succeeds (revoking the agent token, resetting a password) cannot
// change what a later case sees.
func TestRouteRoleMatrix(t *testing.T) {
	w0 := newWorld(t)
	registered := map[string]bool{}
	for _, r := range w0.srv.echo.Routes() {
		key := r.Method + " " + r.Path
		registered[key] = true
		if _, ok := routeMatrix[key]; !ok {
			t.Errorf("route %s has no access expectation; add one and a rule", key)
		}
	}
	for key := range routeMatrix {
		if !registered[key] {
			t.Errorf("the matrix expects route %s, which is not registered", key)
		}
	}
	keys := make([]string, 0, len(registered))
	for k := range registered {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, key := range keys {
		exp, ok := routeMatrix[key]
		if !ok {
			continue
		}
		t.Run(key, func(t *testing.T) {
			t.Parallel() // each route has its own world and database
			w := newWorld(t)
			method, route, _ := strings.Cut(key, " ")
			var extra map[string]string
			if exp.setup != nil {
				extra = exp.setup(w)
			}
			path := matrixPath(t, w, route, extra)
			if exp.query != nil {
				path += "?" + exp.query(w)
			}
			order := make([]int, 0, len(matrixPrincipals))
			for i := range matrixPrincipals {
				if exp.who[i] != wAllow {
					order = append(order, i)
				}
			}
			for i := range matrixPrincipals {
				if exp.who[i] == wAllow {
					order = append(order, i)
				}
			}
			for _, i := range order {
				t.Run(matrixPrincipals[i], func(t *testing.T) {
					var body any
					switch {
					case exp.bodyAs != nil:
						body = exp.bodyAs(w, matrixPrincipals[i])
					case exp.body != nil:
						body = exp.body(w)
					}
					callPath := path
					if exp.paramsAs != nil {
						params := maps.Clone(extra)
						if params == nil {
							params = map[string]string{}
						}
						maps.Copy(params, exp.paramsAs(w, matrixPrincipals[i]))
						callPath = matrixPath(t, w, route, params)
					}
					var res response
					if exp.tus != nil {
						header, raw := exp.tus(w)
						res = w.tus(method, callPath, w.matrixToken(i), header, raw)
					} else {
						res = w.do(method, callPath, w.matrixToken(i), body, nil)
					}
					checkOutcome(t, method, exp.who[i], exp.strict, res)
				})
			}
		})
	}
}

// TestRoleNotSelfAssignable: no one but a manager sets a role or the disabled flag,
// not even on their own record (OWASP API3, broken object-property authorization).
func TestRoleNotSelfAssignable(t *testing.T) {
	w := newWorld(t)
	for _, role := range []accounts.Role{accounts.RoleResearcher, accounts.RoleStaff, accounts.RoleAuditor} {
		self := w.users[role].ID
		tok := w.tokens[role]
		for field, value := range map[string]any{"role": "manager", "disabled": false} {
			res := w.do(http.MethodPatch, "/api/v1/users/"+self, tok, map[string]any{field: value}, nil)
			if res.StatusCode != 403 || res.errorCode() != "forbidden" {
				t.Errorf("%s sets own %s: %d %s, want 403", role, field, res.StatusCode, res.Body)
			}
		}
		// Smuggled beside an allowed field, still refused, and the name is not changed either.
		res := w.do(http.MethodPatch, "/api/v1/users/"+self, tok, map[string]any{"display_name": "Boss", "role": "manager"}, nil)
		if res.StatusCode != 403 {
			t.Errorf("%s sets own name and role: %d %s, want 403", role, res.StatusCode, res.Body)
		}
		var me accounts.User
		if r := w.do(http.MethodGet, "/api/v1/me", tok, nil, &me); r.StatusCode != 200 || me.Role != role || me.DisplayName == "Boss" {
			t.Errorf("%s after the attempts: %d %+v", role, r.StatusCode, me)
		}
		// What they may change, they can.
		if r := w.do(http.MethodPatch, "/api/v1/users/"+self, tok, map[string]any{"display_name": "Dr " + string(role)}, &me); r.StatusCode != 200 || me.DisplayName != "Dr "+string(role) {
			t.Errorf("%s renames self: %d %s", role, r.StatusCode, r.Body)
		}
	}
}

func TestManagerCannotDemoteOrDisableSelf(t *testing.T) {
	w := newWorld(t)
	mgr := w.users[accounts.RoleManager]
	tok := w.tokens[accounts.RoleManager]
	for _, patch := range []map[string]any{{"role": "staff"}, {"role": "researcher"}, {"disabled": true}, {"display_name": "Still Here", "disabled": true}} {
		res := w.do(http.MethodPatch, "/api/v1/users/"+mgr.ID, tok, patch, nil)
		if res.StatusCode != 409 || res.errorCode() != "conflict" {
			t.Errorf("manager patches self with %v: %d %s, want 409", patch, res.StatusCode, res.Body)
		}
	}
	var me accounts.User
	if r := w.do(http.MethodGet, "/api/v1/me", tok, nil, &me); r.StatusCode != 200 || me.Role != accounts.RoleManager || me.Disabled || me.DisplayName == "Still Here" {
		t.Fatalf("manager after the attempts: %d %+v", r.StatusCode, me)
	}
	// The refusal is about oneself: a manager still demotes and disables others.
	staff := w.users[accounts.RoleStaff].ID
	var u accounts.User
	if r := w.do(http.MethodPatch, "/api/v1/users/"+staff, tok, map[string]any{"role": "researcher", "disabled": true}, &u); r.StatusCode != 200 || u.Role != accounts.RoleResearcher || !u.Disabled {
		t.Fatalf("manager demotes staff: %d %s", r.StatusCode, r.Body)
	}
}

// members returns the project's member ids as a manager sees them.
func (w *world) members(t *testing.T, projectID string) []string {
	t.Helper()
	var p accounts.Project
	if r := w.do(http.MethodGet, "/api/v1/projects/"+projectID, w.tokens[accounts.RoleManager], nil, &p); r.StatusCode != 200 {
		t.Fatalf("get project: %d %s", r.StatusCode, r.Body)
	}
	return p.MemberIDs
}

func TestPrincipalInvestigatorManagesOwnMembersOnly(t *testing.T) {
	w := newWorld(t)
	pi := w.tokens[accounts.RoleResearcher]
	me := w.users[accounts.RoleResearcher].ID
	third := w.createUser("third@test.example", accounts.RoleResearcher)
	ownMember := "/api/v1/projects/" + w.own.ID + "/members/"

	// Own project: add and remove.
	var p accounts.Project
	if r := w.do(http.MethodPut, ownMember+w.other.ID, pi, nil, &p); r.StatusCode != 200 || !p.HasMember(w.other.ID) {
		t.Fatalf("PI adds a member: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodPut, ownMember+third.ID, pi, nil, nil); r.StatusCode != 200 {
		t.Fatalf("PI adds a second member: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodDelete, ownMember+third.ID, pi, nil, &p); r.StatusCode != 200 || p.HasMember(third.ID) {
		t.Fatalf("PI removes a member: %d %s", r.StatusCode, r.Body)
	}

	// A plain member of the same project sees it but does not change its members.
	member := w.login(w.other.Email, testPassword).AccessToken
	if r := w.do(http.MethodGet, "/api/v1/projects/"+w.own.ID, member, nil, nil); r.StatusCode != 200 {
		t.Fatalf("member reads the project: %d", r.StatusCode)
	}
	for _, method := range []string{http.MethodPut, http.MethodDelete} {
		if r := w.do(method, ownMember+third.ID, member, nil, nil); r.StatusCode != 403 || r.errorCode() != "forbidden" {
			t.Errorf("non-PI member %s: %d %s, want 403", method, r.StatusCode, r.Body)
		}
	}

	// Foreign project: invisible, so neither joining it nor removing from it works.
	if _, err := w.db.AddMember(context.Background(), w.foreign.ID, third.ID); err != nil {
		t.Fatal(err)
	}
	foreignMember := "/api/v1/projects/" + w.foreign.ID + "/members/"
	if r := w.do(http.MethodPut, foreignMember+me, pi, nil, nil); r.StatusCode != 404 || r.errorCode() != "not_found" {
		t.Errorf("researcher adds self to a foreign project: %d %s, want 404", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodDelete, foreignMember+third.ID, pi, nil, nil); r.StatusCode != 404 || r.errorCode() != "not_found" {
		t.Errorf("researcher removes a member of a foreign project: %d %s, want 404", r.StatusCode, r.Body)
	}
	if got := w.members(t, w.foreign.ID); slices.Contains(got, me) || !slices.Contains(got, third.ID) {
		t.Errorf("foreign project members changed: %v", got)
	}
}

// TestAgentTokenReach: an agent token reaches no user or project route, and among
// instruments only its own.
func TestAgentTokenReach(t *testing.T) {
	w := newWorld(t)
	for _, r := range w.srv.echo.Routes() {
		if !strings.HasPrefix(r.Path, "/api/v1/users") && !strings.HasPrefix(r.Path, "/api/v1/projects") && !strings.HasPrefix(r.Path, "/api/v1/me") {
			continue
		}
		// Fill parameters with objects that exist and are not refused for other reasons.
		path := strings.NewReplacer(":project_id", w.own.ID, ":user_id", w.users[accounts.RoleResearcher].ID).Replace(r.Path)
		var body any
		if exp, ok := routeMatrix[r.Method+" "+r.Path]; ok && exp.body != nil {
			body = exp.body(w)
		}
		if res := w.do(r.Method, path, w.agent, body, nil); res.StatusCode != 403 || res.errorCode() != "forbidden" {
			t.Errorf("agent %s %s: %d %s, want 403", r.Method, path, res.StatusCode, res.Body)
		}
	}

	second, err := w.db.CreateInstrument(context.Background(), scheduling.Instrument{Code: "SEM-2", Name: "Another SEM", Kind: scheduling.KindSEM, Bookable: true, Corrector: scheduling.CorrectorNone}, "setup", time.Now())
	if err != nil {
		t.Fatal(err)
	}
	if r := w.do(http.MethodGet, "/api/v1/instruments/"+w.instr.ID, w.agent, nil, nil); r.StatusCode != 200 {
		t.Errorf("agent reads its instrument: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodGet, "/api/v1/instruments/"+second.ID, w.agent, nil, nil); r.StatusCode != 404 || r.errorCode() != "not_found" {
		t.Errorf("agent reads another instrument: %d %s, want 404", r.StatusCode, r.Body)
	}
	var l list[scheduling.Instrument]
	if r := w.do(http.MethodGet, "/api/v1/instruments", w.agent, nil, &l); r.StatusCode != 200 || len(l.Items) != 1 || l.Items[0].ID != w.instr.ID {
		t.Errorf("agent lists instruments: %d %s, want only %s", r.StatusCode, r.Body, w.instr.ID)
	}
	// A user sees both, so the list above was filtered, not short.
	if r := w.do(http.MethodGet, "/api/v1/instruments", w.tokens[accounts.RoleResearcher], nil, &l); r.StatusCode != 200 || len(l.Items) != 2 {
		t.Errorf("researcher lists instruments: %d %s, want 2", r.StatusCode, r.Body)
	}
	for _, path := range []string{"/api/v1/instruments/" + second.ID + "/agent-tokens", "/api/v1/instruments/" + w.instr.ID + "/agent-tokens"} {
		if r := w.do(http.MethodGet, path, w.agent, nil, nil); r.StatusCode != 403 {
			t.Errorf("agent lists agent tokens at %s: %d, want 403", path, r.StatusCode)
		}
	}

	// The instrument routes admit agents by the instrument:read scope, not for being agents.
	var narrow agentTokenCreated
	body := map[string]any{"name": "usage-only", "scopes": []string{"usage:write"}}
	if r := w.do(http.MethodPost, "/api/v1/instruments/"+w.instr.ID+"/agent-tokens", w.tokens[accounts.RoleManager], body, &narrow); r.StatusCode != 201 {
		t.Fatalf("create usage-only token: %d %s", r.StatusCode, r.Body)
	}
	for _, path := range []string{"/api/v1/instruments/" + w.instr.ID, "/api/v1/instruments", "/api/v1/facility"} {
		if r := w.do(http.MethodGet, path, narrow.Token, nil, nil); r.StatusCode != 403 || r.errorCode() != "forbidden" {
			t.Errorf("agent without instrument:read at %s: %d %s, want 403", path, r.StatusCode, r.Body)
		}
	}
}

func TestAgentTokenRevokedOrExpired(t *testing.T) {
	w := newWorld(t)
	mgr := w.tokens[accounts.RoleManager]
	instrPath := "/api/v1/instruments/" + w.instr.ID

	t.Run("revoked", func(t *testing.T) {
		if r := w.do(http.MethodGet, instrPath, w.agent, nil, nil); r.StatusCode != 200 {
			t.Fatalf("before revoking: %d", r.StatusCode)
		}
		if r := w.do(http.MethodDelete, instrPath+"/agent-tokens/"+w.agentID, mgr, nil, nil); r.StatusCode != 200 {
			t.Fatalf("revoke: %d %s", r.StatusCode, r.Body)
		}
		if r := w.do(http.MethodGet, instrPath, w.agent, nil, nil); r.StatusCode != 401 || r.errorCode() != "unauthorized" {
			t.Errorf("revoked token: %d %s, want 401", r.StatusCode, r.Body)
		}
	})

	t.Run("expired", func(t *testing.T) {
		var created agentTokenCreated
		body := map[string]any{"name": "short-lived", "scopes": []string{"instrument:read"}, "expires_at": w.clock.Now().Add(time.Hour)}
		if r := w.do(http.MethodPost, instrPath+"/agent-tokens", mgr, body, &created); r.StatusCode != 201 || created.Token == "" {
			t.Fatalf("create: %d %s", r.StatusCode, r.Body)
		}
		w.clock.Advance(time.Hour - time.Second)
		if r := w.do(http.MethodGet, instrPath, created.Token, nil, nil); r.StatusCode != 200 {
			t.Fatalf("a second before expiry: %d %s", r.StatusCode, r.Body)
		}
		w.clock.Advance(time.Second)
		if r := w.do(http.MethodGet, instrPath, created.Token, nil, nil); r.StatusCode != 401 || r.errorCode() != "unauthorized" {
			t.Errorf("expired token: %d %s, want 401", r.StatusCode, r.Body)
		}
	})

	t.Run("unknown", func(t *testing.T) {
		fake := accounts.AgentTokenPrefix + "_" + strings.Repeat("A", 43)
		for _, tok := range []string{fake, w.agent + "x", strings.ToUpper(w.agent[:1]) + w.agent[1:]} {
			if r := w.do(http.MethodGet, instrPath, tok, nil, nil); r.StatusCode != 401 || r.errorCode() != "unauthorized" {
				t.Errorf("token %q: %d %s, want 401", tok, r.StatusCode, r.Body)
			}
		}
	})
}

// calendarPath is the calendar query for the whole day of w.nextTuesday.
func calendarPath(w *world) string {
	from := w.nextTuesday(0, 0)
	return "/api/v1/bookings?from=" + url.QueryEscape(from.Format(time.RFC3339)) + "&to=" + url.QueryEscape(from.AddDate(0, 0, 1).Format(time.RFC3339))
}

// TestBookingVisibility: the calendar shows everyone when an instrument is taken but
// the details only to those who may read them; a foreign booking is hidden from a
// researcher and untouched by their attempts on it; a fellow project member reads a
// booking but does not change it; an agent reads its own instrument's calendar only.
func TestBookingVisibility(t *testing.T) {
	w := newWorld(t)
	ctx := context.Background()
	researcher, staff, manager, auditor := w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleStaff], w.tokens[accounts.RoleManager], w.tokens[accounts.RoleAuditor]
	me := w.users[accounts.RoleResearcher].ID
	w.qualify(me, scheduling.LevelIndependent)
	foreignID := matrixBooking(w)[":booking_id"] // w.other's, 09:00–11:00
	foreignPath := "/api/v1/bookings/" + foreignID

	var mine, svc bookingAnswer
	start := w.nextTuesday(12, 0)
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), &mine); r.StatusCode != 201 {
		t.Fatalf("own booking: %d %s", r.StatusCode, r.Body)
	}
	svcStart := w.nextTuesday(16, 0)
	svcBody := map[string]any{"instrument_id": w.instr.ID, "kind": "service", "note": "detector service",
		"start": svcStart.Format(time.RFC3339), "end": svcStart.Add(time.Hour).Format(time.RFC3339)}
	if r := w.do(http.MethodPost, "/api/v1/bookings", staff, svcBody, &svc); r.StatusCode != 201 {
		t.Fatalf("service booking: %d %s", r.StatusCode, r.Body)
	}
	// Service time on a second instrument, which the agent of the first must not see.
	second, err := w.db.CreateInstrument(ctx, scheduling.Instrument{Code: "SEM-2", Name: "Another SEM", Kind: scheduling.KindSEM, Bookable: true, Corrector: scheduling.CorrectorNone}, "setup", time.Now())
	if err != nil {
		t.Fatal(err)
	}
	svcBody["instrument_id"] = second.ID
	if r := w.do(http.MethodPost, "/api/v1/bookings", staff, svcBody, nil); r.StatusCode != 201 {
		t.Fatalf("service booking on the second instrument: %d %s", r.StatusCode, r.Body)
	}

	cal := calendarPath(w)
	slots := func(who, token, query string) map[string]calendarSlot {
		t.Helper()
		var l list[calendarSlot]
		if r := w.do(http.MethodGet, cal+query, token, nil, &l); r.StatusCode != 200 {
			t.Fatalf("%s reads the calendar: %d %s", who, r.StatusCode, r.Body)
		}
		out := map[string]calendarSlot{}
		for _, s := range l.Items {
			out[s.ID] = s
		}
		return out
	}

	got := slots("researcher", researcher, "")
	if len(got) != 4 {
		t.Fatalf("researcher's calendar has %d slots, want 4: %+v", len(got), got)
	}
	if s, ok := got[foreignID]; !ok || s.Mine || s.Booking != nil {
		t.Errorf("foreign slot %+v: want it shown without details", s)
	}
	if s := got[mine.ID]; !s.Mine || s.Booking == nil || s.Booking.UserID != me {
		t.Errorf("own slot %+v: want it marked mine, with details", s)
	}
	if s := got[svc.ID]; s.Mine || s.Booking == nil || s.Booking.Note != "detector service" {
		t.Errorf("service slot %+v: want it shown with details", s)
	}
	for id, s := range slots("auditor", auditor, "") {
		if s.Booking == nil || s.Mine {
			t.Errorf("auditor's slot %s: %+v, want details, not mine", id, s)
		}
	}

	// Every way at the foreign booking is "not found", and none changes it.
	moveTo := w.nextTuesday(14, 0)
	attempts := []struct {
		method, suffix string
		body           any
	}{
		{http.MethodGet, "", nil},
		{http.MethodGet, "/events", nil},
		{http.MethodPatch, "", map[string]string{"start": moveTo.Format(time.RFC3339), "end": moveTo.Add(time.Hour).Format(time.RFC3339)}},
		{http.MethodPost, "/cancel", map[string]string{"reason": "I need the time"}},
	}
	for _, a := range attempts {
		if r := w.do(a.method, foreignPath+a.suffix, researcher, a.body, nil); r.StatusCode != 404 || r.errorCode() != "not_found" {
			t.Errorf("researcher %s %s on a foreign booking: %d %s, want 404", a.method, a.suffix, r.StatusCode, r.Body)
		}
	}
	var after bookingAnswer
	if r := w.do(http.MethodGet, foreignPath, manager, nil, &after); r.StatusCode != 200 ||
		after.Status != scheduling.StatusActive || !after.Start.Equal(w.nextTuesday(9, 0)) || after.Mine {
		t.Errorf("foreign booking after the attempts: %d %s", r.StatusCode, r.Body)
	}
	var evs list[scheduling.BookingEvent]
	if r := w.do(http.MethodGet, foreignPath+"/events", auditor, nil, &evs); r.StatusCode != 200 || len(evs.Items) != 1 || evs.Items[0].Action != "created" {
		t.Errorf("foreign booking's history after the attempts: %d %s", r.StatusCode, r.Body)
	}

	// A fellow member of the project reads the researcher's booking and its history,
	// and changes neither.
	if _, err := w.db.AddMember(ctx, w.own.ID, w.other.ID); err != nil {
		t.Fatal(err)
	}
	fellow := w.login(w.other.Email, testPassword).AccessToken
	minePath := "/api/v1/bookings/" + mine.ID
	var seen bookingAnswer
	if r := w.do(http.MethodGet, minePath, fellow, nil, &seen); r.StatusCode != 200 || seen.Mine || seen.UserID != me {
		t.Errorf("fellow member reads the booking: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodGet, minePath+"/events", fellow, nil, nil); r.StatusCode != 200 {
		t.Errorf("fellow member reads the history: %d %s", r.StatusCode, r.Body)
	}
	for _, a := range attempts[2:] {
		if r := w.do(a.method, minePath+a.suffix, fellow, a.body, nil); r.StatusCode != 403 || r.errorCode() != "forbidden" {
			t.Errorf("fellow member %s %s: %d %s, want 403", a.method, a.suffix, r.StatusCode, r.Body)
		}
	}
	if r := w.do(http.MethodGet, minePath, researcher, nil, &seen); r.StatusCode != 200 || !seen.Mine || seen.Status != scheduling.StatusActive || !seen.Start.Equal(start) {
		t.Errorf("the researcher's booking after the fellow's attempts: %d %s", r.StatusCode, r.Body)
	}

	// The agent reads its own instrument's calendar in full and no other's.
	agentSees := slots("agent", w.agent, "")
	if len(agentSees) != 3 {
		t.Errorf("agent's calendar has %d slots, want the 3 on its instrument", len(agentSees))
	}
	for id, s := range agentSees {
		if s.InstrumentID != w.instr.ID || s.Booking == nil || s.Mine {
			t.Errorf("agent's slot %s: %+v", id, s)
		}
	}
	if n := len(slots("agent", w.agent, "&instrument_id="+w.instr.ID)); n != 3 {
		t.Errorf("agent's calendar of its own instrument: %d slots, want 3", n)
	}
	if r := w.do(http.MethodGet, cal+"&instrument_id="+second.ID, w.agent, nil, nil); r.StatusCode != 404 || r.errorCode() != "not_found" {
		t.Errorf("agent reads another instrument's calendar: %d %s, want 404", r.StatusCode, r.Body)
	}
	secret, hash, err := accounts.NewOpaqueToken(accounts.AgentTokenPrefix)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := w.db.CreateAgentToken(ctx, accounts.NewAgentToken{InstrumentID: w.instr.ID, Name: "usage-only", Scopes: []accounts.Scope{accounts.ScopeUsageWrite}},
		w.users[accounts.RoleManager].ID, hash); err != nil {
		t.Fatal(err)
	}
	if r := w.do(http.MethodGet, cal, secret, nil, nil); r.StatusCode != 403 || r.errorCode() != "forbidden" {
		t.Errorf("agent without instrument:read reads the calendar: %d %s, want 403", r.StatusCode, r.Body)
	}
}

// TestQualificationVisibility: researchers list their own qualifications only; staff
// list anyone's.
func TestQualificationVisibility(t *testing.T) {
	w := newWorld(t)
	me := w.users[accounts.RoleResearcher].ID
	w.qualify(me, scheduling.LevelSupervised)
	w.qualify(w.other.ID, scheduling.LevelUnattended)
	var qs list[scheduling.Qualification]
	if r := w.do(http.MethodGet, "/api/v1/qualifications", w.tokens[accounts.RoleResearcher], nil, &qs); r.StatusCode != 200 ||
		len(qs.Items) != 1 || qs.Items[0].UserID != me {
		t.Errorf("researcher lists qualifications: %d %s, want only their own", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodGet, "/api/v1/qualifications?user_id="+w.other.ID, w.tokens[accounts.RoleResearcher], nil, nil); r.StatusCode != 403 || r.errorCode() != "forbidden" {
		t.Errorf("researcher lists another's qualifications: %d %s, want 403", r.StatusCode, r.Body)
	}
	for _, role := range []accounts.Role{accounts.RoleStaff, accounts.RoleAuditor} {
		if r := w.do(http.MethodGet, "/api/v1/qualifications", w.tokens[role], nil, &qs); r.StatusCode != 200 || len(qs.Items) != 2 {
			t.Errorf("%s lists qualifications: %d %s, want both", role, r.StatusCode, r.Body)
		}
	}
}
