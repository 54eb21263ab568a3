package web

// Option is one choice of a select.
type Option struct {
	Value, Label string
	Selected     bool
}

// StartData is the signed-in user's overview.
type StartData struct {
	Page
	Bookings       []StartBooking
	Qualifications []StartQualification
	Projects       []StartProject
	Acquisitions   []StartAcquisition
}

// StartBooking is one of the user's coming bookings.
type StartBooking struct {
	When, Instrument, Kind, Project, Status, CalendarLink string
}

// StartQualification is the user's standing on one instrument.
type StartQualification struct {
	Instrument, Level, Granted, Expiry string
}

// StartProject is a project the user belongs to.
type StartProject struct {
	Code, Title, RateClass, Part string
}

// StartAcquisition is one recent acquisition in the user's projects.
type StartAcquisition struct {
	ID, When, Instrument, Project, Voltage string
	// Correctable: the viewer may correct it (their own, or anyone's for staff).
	Correctable bool
}

// CalendarData is an instrument's day or week, or the facility's day.
type CalendarData struct {
	Page
	// View is "day", "week" or "facility".
	View         string
	Date         string // YYYY-MM-DD, local
	RangeLabel   string
	InstrumentID string
	Instruments  []Option
	Projects     []Option
	Kinds        []string
	Columns      []Column
	// GridURL reloads the grid as it stands; Prev, Next and Today move it.
	GridURL, PrevURL, NextURL, TodayURL string
	DayURL, WeekURL, FacilityURL        string
}

// AcquireData is the acquisition form.
type AcquireData struct {
	Page
	Bookings  []AcquireBooking
	Specimens []Option
	// Correctable are the recent acquisitions the viewer may correct: their own as the
	// booked user, or any for staff and managers.
	Correctable []Option
}

// AcquireBooking is a booking an acquisition may be recorded on.
type AcquireBooking struct {
	ID, Label, InstrumentID, ProjectID, Start, End string
}

// StatementsData is the statements page; Manage shows managers' compute and issue.
type StatementsData struct {
	Page
	Projects []Option
	Month    string // YYYY-MM, the facility's current month
	Manage   bool
}

// QualificationsData is the qualifications page for staff and managers.
type QualificationsData struct {
	Page
	Users, Instruments []Option
}

// RatesData is the rates page; Manage shows managers the rate calculator.
type RatesData struct {
	Page
	Instruments         []Option
	Manage              bool
	Currency, NextMonth string
}

// LedgerData is the ledger page; Manage offers managers an on-demand checkpoint.
type LedgerData struct {
	Page
	Manage bool
}

// ReportsData is the reports page.
type ReportsData struct {
	Page
	Instruments []Option
	Month       string // YYYY-MM
}

// TraceData is the trace page; Digest, when set, is traced on arrival.
type TraceData struct {
	Page
	Digest string
}

// FilesData is the files page.
type FilesData struct {
	Page
	Acquisitions []Option
	// Selected is a file whose lineage to draw on arrival.
	Selected string
}

// InstrumentsData is the instruments page: capabilities and booking rules for
// everyone who may see it; Manage lets managers add instruments, open or close them
// to bookings and change the rules.
type InstrumentsData struct {
	Page
	Manage                           bool
	Kinds, Correctors, DetectorKinds []string
}

// PeopleData is the people page: users and projects for those who read everything;
// Staff adds the instruments' agent tokens; Manage lets managers add people and
// projects, change members and issue or revoke agent tokens.
type PeopleData struct {
	Page
	Manage, Staff              bool
	Roles, RateClasses, Scopes []string
	Instruments                []Option
}

// ServiceData is the service page: the service windows of the last month and the
// coming quarter, each with the bookings it displaced, and the form to book one.
type ServiceData struct {
	Page
	Instruments    []Option
	Coming, Recent []ServiceWindow
	DefaultStart   string // YYYY-MM-DDTHH:MM, facility time
	DefaultEnd     string
}

// ServiceWindow is one service booking.
type ServiceWindow struct {
	ID, Instrument, When, Note, BookedBy string
	Displaced                            []DisplacedBooking
}

// DisplacedBooking is a booking a service window cancelled, with what staff need to
// offer its holder other time.
type DisplacedBooking struct {
	When, Kind, Person, Email, Project, RebookLink string
}
