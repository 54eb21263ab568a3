package scheduling

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"maps"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strconv"
	"testing"
	"time"

	"beamledger"
)

// updateStatementGolden, set by -update, rewrites testdata/statement_*.csv from the
// current output. It is registered in init, after every file's package variables, so a
// flag of the same name defined elsewhere in the package's tests is shared, not clashed.
var updateStatementGolden = func() bool { return false }

func init() {
	if flag.Lookup("update") == nil {
		flag.Bool("update", false, "rewrite testdata golden files from the current output")
	}
	updateStatementGolden = func() bool {
		f := flag.Lookup("update")
		return f != nil && f.Value.String() == "true"
	}
}

// refFunding is REFERENCE §3's 50/30/20 split.
var refFunding = []FundingShare{{"fa-grant", 5000}, {"fa-centre", 3000}, {"fa-dept", 2000}}

// refStatementInput prices REFERENCE §3's month and gathers it for March 2026 in Berlin.
func refStatementInput(t *testing.T) StatementInput {
	t.Helper()
	loc, _ := time.LoadLocation("Europe/Berlin")
	from, to := PeriodBounds(PeriodMonth, berlin(t, 15, 12, 0), loc)
	in := StatementInput{ID: "st-2026-03", ProjectID: "p-1", Currency: "EUR", PeriodStart: from, PeriodEnd: to}
	for _, c := range refMonth(t) {
		lines, err := ComputeCharges(c, []RateSchedule{refSchedule()}, refPolicy())
		if err != nil {
			t.Fatal(err)
		}
		b := c.Booking
		in.Charges = append(in.Charges, BookingCharges{BookingID: b.ID, InstrumentID: b.InstrumentID, Kind: b.Kind,
			Start: b.Start, Lines: lines, Funding: refFunding})
	}
	slices.Reverse(in.Charges) // assembly orders them itself
	return in
}

func accountTotals(rec StatementRecord) []int64 { return amounts(rec.AccountTotals) }

func TestAssembleStatementReferenceMonth(t *testing.T) {
	s, err := AssembleStatement(refStatementInput(t))
	if err != nil {
		t.Fatal(err)
	}
	rec := s.Record()
	if rec.TotalMinor != 155000 { // [constructed] REFERENCE §3: month total 1 550.00.
		t.Errorf("total %d, want 155000", rec.TotalMinor)
	}
	// [constructed] REFERENCE §3: split 50/30/20 → 775.00 / 465.00 / 310.00.
	if got := accountTotals(rec); !slices.Equal(got, []int64{77500, 46500, 31000}) {
		t.Errorf("account totals %v, want [77500 46500 31000]", got)
	}
	// [constructed] REFERENCE §3: 360 + 120 + 400 + 240 instrument time, 130 staff, 300 late.
	wantComponents := []ComponentTotal{{ComponentInstrumentTime, 112000}, {ComponentStaffTime, 13000}, {ComponentLateCancellation, 30000}}
	if !slices.Equal(rec.ComponentTotals, wantComponents) {
		t.Errorf("component totals %v, want %v", rec.ComponentTotals, wantComponents)
	}
	if rec.Status != StatementDraft || len(rec.Lines) != 6 {
		t.Errorf("status %s with %d lines, want a draft with 6", rec.Status, len(rec.Lines))
	}
	var order []string
	for i, l := range rec.Lines {
		order = append(order, l.BookingID)
		if l.LineNo != i+1 {
			t.Errorf("line %d numbered %d", i+1, l.LineNo)
		}
	}
	if want := []string{"b1", "b2", "b3", "b4", "b5", "b5"}; !slices.Equal(order, want) {
		t.Errorf("line order %v, want %v", order, want)
	}

	// The summary is the record without lines; the per-instrument totals add up the
	// lines naming each instrument; the statement's canonical JSON is its record's.
	sum := s.Summary()
	want := rec
	want.Lines = nil
	if !reflect.DeepEqual(sum, want) {
		t.Errorf("summary %+v, want %+v", sum, want)
	}
	perInstrument := map[string]int64{}
	for _, l := range rec.Lines {
		if l.InstrumentID != "" {
			perInstrument[l.InstrumentID] += l.AmountMinor
		}
	}
	if got := s.InstrumentTotals(); !maps.Equal(got, perInstrument) || len(got) == 0 {
		t.Errorf("instrument totals %v, want %v", got, perInstrument)
	}
	a, errA := s.AppendCanonicalJSON(nil)
	b, errB := rec.AppendCanonicalJSON(nil)
	if (errA == nil) != (errB == nil) || !bytes.Equal(a, b) {
		t.Errorf("the statement's canonical JSON differs from its record's (%v, %v)", errA, errB)
	}
	ja, errA := json.Marshal(s)
	jb, errB := json.Marshal(rec)
	if errA != nil || errB != nil || !bytes.Equal(ja, jb) {
		t.Errorf("the statement's JSON differs from its record's (%v, %v)", errA, errB)
	}
}

func TestAssembleStatementMonthlyCap(t *testing.T) {
	in := refStatementInput(t)
	in.MonthlyCapMinor = 150000
	in.Adjustments = []Adjustment{{ID: "adj-1", At: berlin(t, 20, 10, 0), AmountMinor: -2000, Reason: "detector fault on 9 March",
		By: "u-manager", Funding: []FundingShare{{"fa-grant", 10000}}}}
	s, err := AssembleStatement(in)
	if err != nil {
		t.Fatal(err)
	}
	rec := s.Record()
	capLine := rec.Lines[6]
	// [constructed] charges of 1 550.00 against a monthly cap of 1 500.00 give a visible
	// line of −50.00, taken from the accounts as they were charged: 50/30/20 → −25, −15, −10.
	if capLine.Component != ComponentMonthlyCap || capLine.Rule != ChargeRuleMonthlyCap || capLine.AmountMinor != -5000 ||
		!slices.Equal(amounts(capLine.Allocations), []int64{-2500, -1500, -1000}) {
		t.Errorf("cap line %+v", capLine)
	}
	// [constructed] 1 500.00 after the cap, less the 20.00 credit, which the cap does not touch.
	if rec.TotalMinor != 148000 || !slices.Equal(accountTotals(rec), []int64{73000, 45000, 30000}) {
		t.Errorf("total %d, accounts %v; want 148000, [73000 45000 30000]", rec.TotalMinor, accountTotals(rec))
	}
	if last := rec.ComponentTotals[len(rec.ComponentTotals)-2:]; !slices.Equal(last, []ComponentTotal{{ComponentMonthlyCap, -5000}, {ComponentAdjustment, -2000}}) {
		t.Errorf("component totals %v", rec.ComponentTotals)
	}
	// [constructed] a cap the month stays under adds no line.
	in.MonthlyCapMinor = 155000
	if s, err := AssembleStatement(in); err != nil || len(s.Lines()) != 7 {
		t.Errorf("cap not reached: %d lines, %v", len(s.Lines()), err)
	}
}

func TestStatementIssuedIsImmutable(t *testing.T) {
	draft, err := AssembleStatement(refStatementInput(t))
	if err != nil {
		t.Fatal(err)
	}
	at := berlin(t, 31, 0, 0).AddDate(0, 0, 1)
	issued, err := draft.Issue(at)
	if err != nil {
		t.Fatal(err)
	}
	if draft.Status() != StatementDraft || issued.Status() != StatementIssued {
		t.Fatalf("draft %s, issued %s", draft.Status(), issued.Status())
	}
	// Whatever a caller does to what it was handed, the statement stays as issued.
	lines := issued.Lines()
	lines[0].AmountMinor, lines[0].Allocations[0].AmountMinor = 1, 1
	rec := issued.Record()
	rec.Lines[1].Minutes, rec.AccountTotals[0].AmountMinor, *rec.IssuedAt = 1, 1, time.Time{}
	again := issued.Record()
	if again.Lines[0].AmountMinor != 36000 || again.Lines[0].Allocations[0].AmountMinor != 18000 ||
		again.Lines[1].Minutes != 60 || again.AccountTotals[0].AmountMinor != 77500 || !again.IssuedAt.Equal(at) {
		t.Errorf("issued statement changed through a copy: %+v", again)
	}
	if _, err := issued.Issue(at.Add(time.Hour)); !errors.Is(err, beamledger.ErrConflict) {
		t.Errorf("issuing twice: %v, want ErrConflict", err)
	}
	if _, err := (Statement{}).Issue(at); !errors.Is(err, beamledger.ErrInvalid) {
		t.Errorf("issuing the zero statement: %v", err)
	}
	js, err := json.Marshal(issued)
	if err != nil || !bytes.Contains(js, []byte(`"status":"issued"`)) || !bytes.Contains(js, []byte(`"total_minor":155000`)) {
		t.Errorf("JSON %s, %v", js, err)
	}

	// A stored record comes back only when its numbers add up.
	back, err := RestoreStatement(issued.Record())
	if err != nil || back.Status() != StatementIssued {
		t.Fatalf("restore: %v", err)
	}
	for name, tamper := range map[string]func(*StatementRecord){
		"total":      func(r *StatementRecord) { r.TotalMinor++ },
		"allocation": func(r *StatementRecord) { r.Lines[0].Allocations[0].AmountMinor++ },
		"line":       func(r *StatementRecord) { r.Lines[0].AmountMinor++; r.Lines[0].Allocations[0].AmountMinor++ },
		"status":     func(r *StatementRecord) { r.Status = "final" },
		"issued_at":  func(r *StatementRecord) { r.IssuedAt = nil },
	} {
		r := issued.Record()
		tamper(&r)
		if _, err := RestoreStatement(r); !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("restore with tampered %s: %v", name, err)
		}
	}
}

func TestAssembleStatementRefuses(t *testing.T) {
	var e *beamledger.Error
	for _, c := range []struct {
		name  string
		edit  func(*StatementInput)
		field string
	}{
		{"charge in another month", func(in *StatementInput) { in.Charges[0].Start = in.PeriodEnd }, "charges[0].start"},
		{"other currency", func(in *StatementInput) { in.Charges[1].Lines[0].Currency = "USD" }, "charges[1].lines[0].currency"},
		{"negative charge", func(in *StatementInput) { in.Charges[1].Lines[0].AmountMinor = -1 }, "charges[1].lines[0].amount_minor"},
		{"split short of 100 %", func(in *StatementInput) { in.Charges[2].Funding = []FundingShare{{"fa-grant", 9999}} }, "charges[2].funding"},
		{"adjustment without reason", func(in *StatementInput) {
			in.Adjustments = []Adjustment{{ID: "a", At: in.PeriodStart, AmountMinor: 100, Reason: " ", Funding: refFunding}}
		}, "adjustments[0].reason"},
		{"adjustment before the period", func(in *StatementInput) {
			in.Adjustments = []Adjustment{{ID: "a", At: in.PeriodStart.Add(-time.Second), AmountMinor: 100, Reason: "x", Funding: refFunding}}
		}, "adjustments[0].at"},
		{"zero adjustment", func(in *StatementInput) {
			in.Adjustments = []Adjustment{{ID: "a", At: in.PeriodStart, Reason: "x", Funding: refFunding}}
		}, "adjustments[0].amount_minor"},
		{"period backwards", func(in *StatementInput) { in.PeriodEnd = in.PeriodStart }, "period_end"},
		{"no currency", func(in *StatementInput) { in.Currency = "" }, "currency"},
	} {
		in := refStatementInput(t)
		c.edit(&in)
		_, err := AssembleStatement(in)
		if !errors.As(err, &e) || !errors.Is(err, beamledger.ErrInvalid) || e.Fields[c.field] == "" {
			t.Errorf("%s: %v, want an error on %s", c.name, err, c.field)
		}
	}
}

func TestStatementCSVGolden(t *testing.T) {
	in := refStatementInput(t)
	in.MonthlyCapMinor = 150000
	in.Adjustments = []Adjustment{{ID: "adj-1", At: berlin(t, 20, 10, 0), AmountMinor: -2000,
		Reason: "detector fault on 9 March, \"beam blanker\"", By: "u-manager", Funding: []FundingShare{{"fa-grant", 10000}},
		CorrectsStatementID: "st-2026-02"}}
	s, err := AssembleStatement(in)
	if err != nil {
		t.Fatal(err)
	}
	s, err = s.Issue(time.Date(2026, 4, 1, 9, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteStatementCSV(&buf, s); err != nil {
		t.Fatal(err)
	}
	golden := filepath.Join("testdata", "statement_reference_month.csv")
	if updateStatementGolden() {
		if err := os.WriteFile(golden, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatalf("%v (run go test -run StatementCSV -update to create it)", err)
	}
	if !bytes.Equal(buf.Bytes(), want) {
		t.Errorf("CSV differs from %s (go test -update rewrites it after review):\n%s", golden, buf.String())
	}
	// The amount_minor column sums to the statement's total: 1 480.00 [constructed], as
	// in TestAssembleStatementMonthlyCap.
	rows, err := csv.NewReader(bytes.NewReader(buf.Bytes())).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(rows[0], StatementCSVColumns()) {
		t.Errorf("header %v", rows[0])
	}
	var sum int64
	col := slices.Index(StatementCSVColumns(), "amount_minor")
	for _, r := range rows[1:] {
		v, err := strconv.ParseInt(r[col], 10, 64)
		if err != nil {
			t.Fatalf("row %q: %v", r, err)
		}
		sum += v
	}
	if sum != 148000 || len(rows) != 1+6*3+3+1 { // six charge lines and the cap on three accounts, one credit on one
		t.Errorf("amount_minor sums to %d over %d rows, want 148000 over 23", sum, len(rows))
	}
}

func TestFormatMinor(t *testing.T) {
	for _, c := range []struct {
		amount   int64
		currency string
		want     string
	}{
		{36000, "EUR", "360.00"}, {-5, "EUR", "-0.05"}, {0, "USD", "0.00"},
		{1234, "JPY", "1234"}, {1234, "KWD", "1.234"}, {7, "CLF", "0.0007"},
		{-9223372036854775808, "EUR", "-92233720368547758.08"},
	} {
		if got := FormatMinor(c.amount, c.currency); got != c.want {
			t.Errorf("FormatMinor(%d, %s) = %q, want %q", c.amount, c.currency, got, c.want)
		}
	}
}
