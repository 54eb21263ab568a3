package postgres_test

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres"
)

// keptWorld is a facility where one researcher books one instrument for one project,
// qualified and funded, and a recording check that lets every booking through.
type keptWorld struct {
	db   *postgres.DB
	raw  *pgx.Conn
	mgr  accounts.User
	pi   accounts.User
	in   scheduling.Instrument
	p    accounts.Project
	from time.Time
	next int      // the next free hour after from
	seen []string // what the check was shown, one entry per call
	last scheduling.BookingContext
}

func newKeptWorld(t *testing.T) *keptWorld {
	db, raw := openRaw(t)
	from := time.Date(2031, 3, 3, 0, 0, 0, 0, time.UTC)
	mgr, pi, in := billingFacility(t, db, from)
	p := fundedProject(t, db, mgr, pi, "P-1")
	if _, err := db.GrantQualification(context.Background(), scheduling.NewQualification{UserID: pi.ID, InstrumentID: in.ID,
		Level: scheduling.LevelIndependent, Reason: "trained", GrantedBy: mgr.ID}, t0); err != nil {
		t.Fatal(err)
	}
	return &keptWorld{db: db, raw: raw, mgr: mgr, pi: pi, in: in, p: p, from: from}
}

func (w *keptWorld) booking(hours int) scheduling.NewBooking {
	start := w.from.Add(time.Duration(w.next) * time.Hour)
	w.next += hours + 1
	return scheduling.NewBooking{InstrumentID: w.in.ID, ProjectID: w.p.ID, UserID: w.pi.ID, Kind: scheduling.KindIndependent,
		Start: start, End: start.Add(time.Duration(hours) * time.Hour), Actor: w.pi.ID}
}

// book makes nb with check, recording what every call of check was shown.
func (w *keptWorld) book(t *testing.T, nb scheduling.NewBooking, check func(scheduling.BookingContext) error) error {
	t.Helper()
	w.seen = nil
	_, err := w.db.CreateBooking(context.Background(), nb, t0, func(bc scheduling.BookingContext) error {
		w.last = bc
		w.seen = append(w.seen, describeContext(bc))
		if check != nil {
			return check(bc)
		}
		return nil
	})
	return err
}

// warm books twice and checks that a context is then kept.
func (w *keptWorld) warm(t *testing.T) {
	t.Helper()
	for range 2 {
		if err := w.book(t, w.booking(1), nil); err != nil {
			t.Fatal(err)
		}
	}
	if !w.db.KeepsContext(w.booking(1)) {
		t.Fatal("no context kept after two bookings")
	}
}

func describeContext(bc scheduling.BookingContext) string {
	q := "none"
	if bc.Qualification != nil {
		q = string(bc.Qualification.Level)
	}
	return strings.Join([]string{"member=" + boolWord(bc.Member), "bookable=" + boolWord(bc.Bookable), "qualification=" + q}, " ")
}

func boolWord(b bool) string {
	if b {
		return "yes"
	}
	return "no"
}

// TestKeptBookingContextFollowsChanges checks that a booking made from a kept rules
// context never goes past a change committed before it: after each change to what
// the rules are judged from (made through the store, or by plain SQL as any other
// writer would), the next booking's check is shown the changed context. Each change
// is made with a context kept from the bookings just before it.
func TestKeptBookingContextFollowsChanges(t *testing.T) {
	w := newKeptWorld(t)
	ctx := context.Background()
	raw := w.raw
	changes := []struct {
		name   string
		change func() error
		want   func(scheduling.BookingContext) bool
	}{
		{"qualification revoked", func() error {
			q, err := w.db.GrantQualification(ctx, scheduling.NewQualification{UserID: w.pi.ID, InstrumentID: w.in.ID,
				Level: scheduling.LevelSupervised, Reason: "re-trained", GrantedBy: w.mgr.ID}, t0)
			if err != nil {
				return err
			}
			_, err = w.db.RevokeQualification(ctx, q.ID, w.mgr.ID, "lapsed", t0)
			return err
		}, func(bc scheduling.BookingContext) bool { return bc.Qualification == nil }},
		{"qualification granted", func() error {
			_, err := w.db.GrantQualification(ctx, scheduling.NewQualification{UserID: w.pi.ID, InstrumentID: w.in.ID,
				Level: scheduling.LevelUnattended, Reason: "trained", GrantedBy: w.mgr.ID}, t0)
			return err
		}, func(bc scheduling.BookingContext) bool {
			return bc.Qualification != nil && bc.Qualification.Level == scheduling.LevelUnattended
		}},
		{"instrument closed for booking", func() error {
			_, err := w.db.SetInstrumentBookable(ctx, w.in.ID, false, w.mgr.ID, t0)
			return err
		}, func(bc scheduling.BookingContext) bool { return !bc.Bookable }},
		{"instrument reopened", func() error {
			_, err := w.db.SetInstrumentBookable(ctx, w.in.ID, true, w.mgr.ID, t0)
			return err
		}, func(bc scheduling.BookingContext) bool { return bc.Bookable }},
		{"facility rules", func() error {
			return w.db.SetFacilityRules(ctx, scheduling.RulesOverride{MaxLengthMinutes: ptr(90)})
		}, func(bc scheduling.BookingContext) bool { return bc.Rules.MaxLengthMinutes == 90 }},
		{"instrument rules", func() error {
			return w.db.SetInstrumentRules(ctx, w.in.ID, scheduling.RulesOverride{MaxLengthMinutes: ptr(75)})
		}, func(bc scheduling.BookingContext) bool { return bc.Rules.MaxLengthMinutes == 75 }},
		{"membership ended, by SQL", func() error {
			_, err := raw.Exec(ctx, `DELETE FROM project_members WHERE project_id = $1 AND user_id = $2`, w.p.ID, w.pi.ID)
			return err
		}, func(bc scheduling.BookingContext) bool { return !bc.Member }},
		{"membership restored", func() error {
			_, err := w.db.AddMember(ctx, w.p.ID, w.pi.ID)
			return err
		}, func(bc scheduling.BookingContext) bool { return bc.Member }},
		{"funding account expiring, by SQL", func() error {
			_, err := raw.Exec(ctx, `UPDATE funding_accounts SET valid_until = $1`, w.from)
			return err
		}, func(bc scheduling.BookingContext) bool {
			return len(bc.FundingSplit) == 1 && len(bc.FundingAccounts) == 1
		}},
	}
	for _, c := range changes {
		w.warm(t)
		if err := c.change(); err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if err := w.book(t, w.booking(1), nil); err != nil {
			t.Fatalf("%s: booking after it: %v", c.name, err)
		}
		if !c.want(w.last) {
			t.Errorf("%s: the booking after it was judged on %v, which does not show the change", c.name, w.seen)
		}
	}
	// A split with an account valid for a while depends on the range: nothing is kept.
	if w.db.KeepsContext(w.booking(1)) {
		t.Error("a context was kept for a funding split whose account has validity dates")
	}
}

// TestKeptBookingContextAnswersLikeARead checks the one-statement booking from a kept
// context where it must refuse: a range taken on the instrument or by the assisting
// staff member is a Conflict naming the range, a range held for a waitlist offer is
// refused by the check shown the hold, and a booking the check refuses on the kept
// context is judged again on a fresh read (the kept context only ever lets a booking
// through).
func TestKeptBookingContextAnswersLikeARead(t *testing.T) {
	w := newKeptWorld(t)
	ctx := context.Background()
	raw := w.raw

	w.warm(t)
	taken := w.booking(2)
	if err := w.book(t, taken, nil); err != nil {
		t.Fatal(err)
	}
	over := taken
	over.Start, over.End = taken.Start.Add(time.Hour), taken.End.Add(time.Hour)
	err := w.book(t, over, nil)
	wantKind(t, err, beamledger.ErrConflict)
	if want := "the instrument is booked from " + taken.Start.Format(time.RFC3339); err == nil || !strings.HasPrefix(err.Error(), want) {
		t.Errorf("overlapping booking: %v, want %q…", err, want)
	}
	if len(w.seen) != 1 {
		t.Errorf("overlapping booking: the check ran %d times, want once (on the kept context)", len(w.seen))
	}

	// The assisting staff member is busy on another instrument.
	staff := mustCreateUser(t, w.db, "staff@example.org", accounts.RoleStaff)
	other := mustCreateInstrument(t, w.db, "TEM-2")
	busy := w.booking(2)
	if _, err := raw.Exec(ctx, `
INSERT INTO bookings (instrument_id, project_id, user_id, kind, during, staff_id, created_at, created_by, updated_at)
VALUES ($1, $2, $3, 'assisted', tstzrange($4, $5, '[)'), $6, $7, 'test', $7)`, other.ID, w.p.ID, w.pi.ID, busy.Start, busy.End, staff.ID, t0); err != nil {
		t.Fatal(err)
	}
	assisted := func() scheduling.NewBooking {
		nb := w.booking(1)
		nb.Kind, nb.StaffID = scheduling.KindAssisted, staff.ID
		return nb
	}
	for range 2 { // the second from the kept context
		if err := w.book(t, assisted(), nil); err != nil {
			t.Fatal(err)
		}
	}
	clash := assisted()
	clash.Start, clash.End = busy.Start, busy.Start.Add(time.Hour)
	err = w.book(t, clash, nil)
	wantKind(t, err, beamledger.ErrConflict)
	if want := "the staff member is assisting or training elsewhere from " + busy.Start.Format(time.RFC3339); err == nil || !strings.HasPrefix(err.Error(), want) {
		t.Errorf("staff member busy: %v, want %q…", err, want)
	}

	// Part of the range is offered to someone else from the waitlist.
	other2 := mustCreateUser(t, w.db, "other@example.org", accounts.RoleResearcher)
	held := w.booking(2)
	until := t0.Add(30 * time.Minute)
	if _, err := raw.Exec(ctx, `
INSERT INTO waitlist_entries (instrument_id, project_id, user_id, kind, during, status, offered_at, offer_expires_at, created_at, updated_at)
VALUES ($1, $2, $3, 'independent', tstzrange($4, $5, '[)'), 'offered', $6, $7, $6, $6)`, w.in.ID, w.p.ID, other2.ID, held.Start, held.End, t0, until); err != nil {
		t.Fatal(err)
	}
	errHeld := errors.New("held")
	refuseHeld := func(bc scheduling.BookingContext) error {
		if bc.HeldUntil != nil {
			return errHeld
		}
		return nil
	}
	w.warm(t)
	err = w.book(t, held, refuseHeld)
	if !errors.Is(err, errHeld) {
		t.Errorf("range held for an offer: %v, want the check's refusal", err)
	}
	if w.last.HeldUntil == nil || !w.last.HeldUntil.Equal(until) {
		t.Errorf("range held for an offer: the check was shown a hold until %v, want %v", w.last.HeldUntil, until)
	}

	// A refusal on the kept context is not final: the check is asked again on a
	// fresh read, and here lets the booking through.
	w.warm(t)
	calls := 0
	err = w.book(t, w.booking(1), func(scheduling.BookingContext) error {
		calls++
		if calls == 1 {
			return beamledger.RuleViolation("test", "refused once", nil)
		}
		return nil
	})
	if err != nil || calls != 2 {
		t.Errorf("refused on the kept context, allowed on a fresh read: %v after %d calls, want a booking after 2", err, calls)
	}
	var n int
	if err := raw.QueryRow(ctx, `SELECT count(*) FROM bookings WHERE during && tstzrange($1, $2, '[)') AND instrument_id = $3`,
		held.Start, held.End, w.in.ID).Scan(&n); err != nil || n != 0 {
		t.Errorf("bookings in the held range: %d (%v), want none", n, err)
	}
}

// TestBookingRulesGenerationRow checks which writes move the generation on (those to
// columns the rules are read from; not a qualification's last use, which check-in
// moves forward, nor the facility's other settings), that its one row cannot be
// deleted, and that the migration adding it goes down and up again cleanly.
func TestBookingRulesGenerationRow(t *testing.T) {
	w := newKeptWorld(t)
	db, raw, mgr := w.db, w.raw, w.mgr
	ctx := context.Background()
	for _, w := range []struct {
		sql   string
		moves bool
	}{
		{`UPDATE qualifications SET last_used_at = now()`, false},
		{`UPDATE facility SET optics_settings = '{}'`, false},
		{`UPDATE instruments SET billing_override = '{}'`, false},
		{`UPDATE qualifications SET expires_after_idle_days = 30`, true},
		{`UPDATE facility SET booking_rules = '{}'`, true},
		{`UPDATE instruments SET name = 'TEM one'`, true},
	} {
		var before, after int64
		if err := raw.QueryRow(ctx, `SELECT n FROM booking_rules_generation`).Scan(&before); err != nil {
			t.Fatal(err)
		}
		if _, err := raw.Exec(ctx, w.sql); err != nil {
			t.Fatalf("%s: %v", w.sql, err)
		}
		if err := raw.QueryRow(ctx, `SELECT n FROM booking_rules_generation`).Scan(&after); err != nil {
			t.Fatal(err)
		}
		if moved := after != before; moved != w.moves {
			t.Errorf("%s: generation moved %v, want %v", w.sql, moved, w.moves)
		}
	}
	for _, q := range []string{`DELETE FROM booking_rules_generation`, `TRUNCATE booking_rules_generation`} {
		if _, err := raw.Exec(ctx, q); err == nil || !strings.Contains(err.Error(), "keeps its one row") {
			t.Errorf("%s: %v, want it refused", q, err)
		}
	}
	if err := db.MigrateTo(ctx, 13); err != nil {
		t.Fatalf("down to 13: %v", err)
	}
	if err := db.MigrateTo(ctx, 14); err != nil {
		t.Fatalf("up to 14 again: %v", err)
	}
	var n int64
	if err := raw.QueryRow(ctx, `SELECT n FROM booking_rules_generation WHERE id = 1`).Scan(&n); err != nil || n != 1 {
		t.Errorf("generation after the migration ran again: %d (%v), want 1", n, err)
	}
	if _, err := raw.Exec(ctx, `UPDATE qualifications SET revoked_at = now(), revoked_by = $1, revoke_reason = 'test'`, mgr.ID); err != nil {
		t.Fatal(err)
	}
	if err := raw.QueryRow(ctx, `SELECT n FROM booking_rules_generation WHERE id = 1`).Scan(&n); err != nil || n != 2 {
		t.Errorf("generation after a revocation once the migration ran again: %d (%v), want 2", n, err)
	}
}
