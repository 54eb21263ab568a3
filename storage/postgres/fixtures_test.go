package postgres_test

import (
	"context"
	"crypto/sha256"
	"errors"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// t0 is the clock the tests pass as now. It has no sub-microsecond part, so times
// come back from PostgreSQL (which keeps microseconds) exactly as sent.
var t0 = time.Date(2031, 3, 14, 9, 26, 53, 589793000, time.UTC)

// tokenHash stands in for the SHA-256 of a presented secret; the schema insists on
// 32 bytes.
func tokenHash(secret string) []byte {
	h := sha256.Sum256([]byte(secret))
	return h[:]
}

// openRaw gives a store and a plain connection to the same fresh database, for the
// few tests that must set up state no store method can (a disabled user whose
// sessions were not revoked, a version row left by a newer binary).
func openRaw(t *testing.T) (*postgres.DB, *pgx.Conn) {
	t.Helper()
	url := pgtest.NewDatabase(t)
	ctx := context.Background()
	db, err := postgres.Open(ctx, url, 8)
	if err != nil {
		t.Fatalf("open store: %v", err)
	}
	t.Cleanup(db.Close)
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatalf("connect: %v", err)
	}
	t.Cleanup(func() { conn.Close(context.Background()) })
	return db, conn
}

func mustCreateUser(t *testing.T, db *postgres.DB, email string, role accounts.Role) accounts.User {
	t.Helper()
	u, err := db.CreateUser(context.Background(), accounts.NewUser{Email: email, DisplayName: "User " + email, Role: role}, "hash-of-"+email)
	if err != nil {
		t.Fatalf("CreateUser(%s): %v", email, err)
	}
	return u
}

func mustCreateInstrument(t *testing.T, db *postgres.DB, code string) scheduling.Instrument {
	t.Helper()
	in, err := db.CreateInstrument(context.Background(), scheduling.Instrument{
		Code: code, Name: "Instrument " + code, Kind: scheduling.KindSTEM, Bookable: true,
		AcceleratingVoltagesV: []float64{80e3, 300e3}, Corrector: scheduling.CorrectorProbe,
	}, "setup", time.Now())
	if err != nil {
		t.Fatalf("CreateInstrument(%s): %v", code, err)
	}
	return in
}

// wantKind fails the test unless err wraps kind.
func wantKind(t *testing.T, err, kind error) {
	t.Helper()
	if !errors.Is(err, kind) {
		t.Fatalf("error = %v (%T), want one wrapping %v", err, err, kind)
	}
}

// domainError returns err as a *beamledger.Error, failing the test when it is not one.
func domainError(t *testing.T, err error) *beamledger.Error {
	t.Helper()
	var e *beamledger.Error
	if !errors.As(err, &e) {
		t.Fatalf("error = %v (%T), want a *beamledger.Error", err, err)
	}
	return e
}

func ptr[T any](v T) *T { return &v }

func newUserFor(email string) accounts.NewUser {
	return accounts.NewUser{Email: email, DisplayName: "User " + email, Role: accounts.RoleResearcher}
}

// billingFacility sets up what the billing tests share: a facility in UTC billing in
// EUR, a manager, a principal investigator and the instrument TEM-1 with one rate
// schedule from `from`, internal independent time at 120.00 an hour.
func billingFacility(t *testing.T, db *postgres.DB, from time.Time) (mgr, pi accounts.User, in scheduling.Instrument) {
	t.Helper()
	ctx := context.Background()
	if _, err := db.SetFacility(ctx, scheduling.Facility{Name: "F", TimeZone: "UTC", Currency: "EUR"}); err != nil {
		t.Fatal(err)
	}
	mgr = mustCreateUser(t, db, "m@example.org", accounts.RoleManager)
	pi = mustCreateUser(t, db, "pi@example.org", accounts.RoleResearcher)
	in = mustCreateInstrument(t, db, "TEM-1")
	if _, err := db.CreateRateSchedule(ctx, scheduling.RateSchedule{InstrumentID: in.ID, EffectiveFrom: from, Currency: "EUR",
		Classes: []scheduling.ClassRates{{RateClass: accounts.RateInternal, IndependentHourlyMinor: 12000}}}, mgr.ID, t0); err != nil {
		t.Fatal(err)
	}
	return mgr, pi, in
}

// fundedProject makes the project code led by pi with one funding account, G-code,
// taking the whole of its default split.
func fundedProject(t *testing.T, db *postgres.DB, mgr, pi accounts.User, code string) accounts.Project {
	t.Helper()
	ctx := context.Background()
	p := mustCreateProject(t, db, code, pi.ID)
	acct, err := db.SaveFundingAccount(ctx, scheduling.FundingAccount{ProjectID: p.ID, Code: "G-" + code}, mgr.ID, t0)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.SetProjectFunding(ctx, p.ID, []scheduling.FundingShare{{AccountID: acct.ID, BasisPoints: 10000}}, mgr.ID, t0); err != nil {
		t.Fatal(err)
	}
	return p
}

// mustBook books [start, end) of instrument for project as an independent booking by
// user, with every rule passed, and returns its id.
func mustBook(t *testing.T, db *postgres.DB, instrument, project, user string, start, end time.Time) string {
	t.Helper()
	b, err := db.CreateBooking(context.Background(), scheduling.NewBooking{InstrumentID: instrument, ProjectID: project, UserID: user,
		Kind: scheduling.KindIndependent, Start: start, End: end, Actor: user}, t0, func(scheduling.BookingContext) error { return nil })
	if err != nil {
		t.Fatal(err)
	}
	return b.ID
}
