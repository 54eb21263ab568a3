package scheduling

import (
	"cmp"
	"encoding/json"
	"fmt"
	"slices"
	"strings"
	"time"

	"beamledger"
	"beamledger/accounts"
)

// StatementStatus is whether a statement may still change.
type StatementStatus string

// Statement statuses. An issued statement has gone to the project and to finance, so it
// never changes again: a later correction is an adjustment in a later period.
const (
	StatementDraft  StatementStatus = "draft"
	StatementIssued StatementStatus = "issued"
)

// BookingCharges are one booking's charge lines with the funding split its project set.
type BookingCharges struct {
	BookingID    string         `json:"booking_id"`
	InstrumentID string         `json:"instrument_id"`
	Kind         BookingKind    `json:"kind"`
	Start        time.Time      `json:"start"` // decides the period the charges fall in
	Lines        []ChargeLine   `json:"lines"`
	Funding      []FundingShare `json:"funding"`
	// Accounts, when set, says the lines were priced at RateClass for these accounts of
	// Funding only (their accounts carry that class, others of the split another): each
	// line's amount is split by the whole of Funding and only these accounts' parts are
	// kept, the line's amount becoming their sum.
	Accounts  []string           `json:"accounts,omitempty"`
	RateClass accounts.RateClass `json:"rate_class,omitempty"`
}

// Adjustment is a manager's credit (negative) or debit (positive) with a reason, the
// one way to change what a project owes after the charges were computed.
type Adjustment struct {
	ID          string         `json:"id"`
	At          time.Time      `json:"at"` // when it was made; decides its period
	AmountMinor int64          `json:"amount_minor"`
	Reason      string         `json:"reason"`
	By          string         `json:"by"`
	Funding     []FundingShare `json:"funding"`
	// CorrectsStatementID names the issued statement this corrects, if any.
	CorrectsStatementID string `json:"corrects_statement_id,omitempty"`
}

// StatementInput is everything a statement is assembled from.
type StatementInput struct {
	ID        string `json:"id"`
	ProjectID string `json:"project_id"`
	Currency  string `json:"currency"`
	// PeriodStart and PeriodEnd bound the period [start, end), normally a calendar month
	// in the facility's zone (PeriodBounds with PeriodMonth).
	PeriodStart time.Time        `json:"period_start"`
	PeriodEnd   time.Time        `json:"period_end"`
	Charges     []BookingCharges `json:"charges"`
	Adjustments []Adjustment     `json:"adjustments"`
	// MonthlyCapMinor is the facility policy's cap on the project's charges in the
	// period; 0 means none.
	MonthlyCapMinor int64 `json:"monthly_cap_minor"`
}

// StatementLine is one line of a statement: a booking's charge line, the monthly cap or
// an adjustment, with its amount split across funding accounts.
type StatementLine struct {
	LineNo          int             `json:"line_no"`
	BookingID       string          `json:"booking_id,omitempty"`
	InstrumentID    string          `json:"instrument_id,omitempty"`
	BookingKind     BookingKind     `json:"booking_kind,omitempty"`
	BookingStart    *time.Time      `json:"booking_start,omitempty"`
	Component       ChargeComponent `json:"component"`
	Rule            ChargeRule      `json:"rule"`
	From            *time.Time      `json:"from,omitempty"`
	To              *time.Time      `json:"to,omitempty"`
	Minutes         int             `json:"minutes"`
	HourlyRateMinor int64           `json:"hourly_rate_minor"`
	AmountMinor     int64           `json:"amount_minor"`
	Reason          string          `json:"reason,omitempty"`
	AdjustmentID    string          `json:"adjustment_id,omitempty"`
	// CorrectsStatementID is an adjustment's issued statement it corrects, if any.
	CorrectsStatementID string       `json:"corrects_statement_id,omitempty"`
	Allocations         []Allocation `json:"allocations"`
}

// ComponentTotal is a statement's total for one component.
type ComponentTotal struct {
	Component   ChargeComponent `json:"component"`
	AmountMinor int64           `json:"amount_minor"`
}

// StatementRecord is a statement as plain data: what storage keeps and JSON shows.
// Changing a record changes no Statement; RestoreStatement checks one back in.
type StatementRecord struct {
	ID          string          `json:"id"`
	ProjectID   string          `json:"project_id"`
	Currency    string          `json:"currency"`
	PeriodStart time.Time       `json:"period_start"`
	PeriodEnd   time.Time       `json:"period_end"`
	Status      StatementStatus `json:"status"`
	IssuedAt    *time.Time      `json:"issued_at,omitempty"`
	Lines       []StatementLine `json:"lines"`
	// ComponentTotals are in the order of componentOrder, only components present.
	ComponentTotals []ComponentTotal `json:"component_totals"`
	// AccountTotals are per funding account, in the order accounts first appear.
	AccountTotals []Allocation `json:"account_totals"`
	TotalMinor    int64        `json:"total_minor"`
}

// Statement is a project's charges for a period. Its fields are unexported and every
// accessor hands out copies, so nothing outside this package can change its lines:
// a draft is replaced by assembling it again, and an issued statement stays as issued.
type Statement struct {
	rec StatementRecord
}

// componentOrder is the order of totals and of a booking's lines on a statement.
var componentOrder = []ChargeComponent{ComponentInstrumentTime, ComponentStaffTime, ComponentLateCancellation,
	ComponentNoShow, ComponentMonthlyCap, ComponentAdjustment}

// AssembleStatement builds the draft statement of a project for a period. Lines come
// in this order: charge lines by booking start (then booking id), each booking's lines
// as computed; then, when the charges pass the monthly cap, a monthly_cap line taking
// off the excess, split across accounts in proportion to what the charges put on each;
// then adjustments by instant (then id). The cap bounds the computed charges only:
// adjustments are a manager's deliberate changes and stand as made.
//
// Errors: ErrInvalid, naming the field, for a charge or adjustment outside the period,
// a line in another currency, a negative charge, a missing reason, a funding split that
// does not sum to 100 %, or totals beyond what money may hold.
func AssembleStatement(in StatementInput) (Statement, error) {
	if err := in.validate(); err != nil {
		return Statement{}, err
	}
	a := statementAssembler{rec: StatementRecord{ID: in.ID, ProjectID: in.ProjectID, Currency: in.Currency,
		PeriodStart: in.PeriodStart, PeriodEnd: in.PeriodEnd, Status: StatementDraft}}
	charges := slices.Clone(in.Charges)
	slices.SortStableFunc(charges, func(x, y BookingCharges) int {
		return cmp.Or(x.Start.Compare(y.Start), strings.Compare(x.BookingID, y.BookingID))
	})
	n := len(in.Adjustments) + 1
	for _, c := range charges {
		n += len(c.Lines)
	}
	a.rec.Lines = make([]StatementLine, 0, n)
	// The lines' instants, three per charge line, share one array (its capacity is
	// never passed, so the pointers stay put).
	instants := make([]time.Time, 0, 3*(n-len(in.Adjustments)-1))
	at := func(t time.Time) *time.Time {
		instants = append(instants, t)
		return &instants[len(instants)-1]
	}
	for _, c := range charges {
		for _, l := range c.Lines {
			line := StatementLine{BookingID: c.BookingID, InstrumentID: c.InstrumentID, BookingKind: c.Kind,
				BookingStart: at(c.Start), Component: l.Component, Rule: l.Rule, From: at(l.From), To: at(l.To),
				Minutes: l.Minutes, HourlyRateMinor: l.HourlyRateMinor, AmountMinor: l.AmountMinor}
			if len(c.Accounts) > 0 {
				line.Reason = "the share of the split priced at the " + string(c.RateClass) + " rate"
			}
			a.addPart(line, c.Funding, c.Accounts)
		}
	}
	if in.MonthlyCapMinor > 0 && a.rec.TotalMinor > in.MonthlyCapMinor {
		a.addCap(in.MonthlyCapMinor - a.rec.TotalMinor)
	}
	adjustments := slices.Clone(in.Adjustments)
	slices.SortStableFunc(adjustments, func(x, y Adjustment) int {
		return cmp.Or(x.At.Compare(y.At), strings.Compare(x.ID, y.ID))
	})
	for _, adj := range adjustments {
		a.add(StatementLine{Component: ComponentAdjustment, Rule: ChargeRuleAdjustment, AmountMinor: adj.AmountMinor,
			Reason: adj.Reason, AdjustmentID: adj.ID, CorrectsStatementID: adj.CorrectsStatementID}, adj.Funding)
	}
	if a.err != nil {
		return Statement{}, a.err
	}
	var ok bool
	if a.rec.ComponentTotals, ok = componentTotals(a.rec.Lines); !ok {
		return Statement{}, beamledger.Invalid("a component's total is beyond what money may hold", nil)
	}
	return Statement{rec: a.rec}, nil
}

// statementAssembler accumulates lines and totals, keeping the first error.
type statementAssembler struct {
	rec StatementRecord
	err error
}

// add splits a line across the funding and appends it.
func (a *statementAssembler) add(l StatementLine, funding []FundingShare) {
	if a.err != nil {
		return
	}
	allocs, err := SplitAmount(l.AmountMinor, funding)
	if err != nil {
		a.err = err
		return
	}
	a.append(l, allocs)
}

// addPart is add keeping only the named accounts' parts of the split (all when
// accounts is empty); the line's amount becomes the sum of the parts kept.
func (a *statementAssembler) addPart(l StatementLine, funding []FundingShare, accounts []string) {
	if len(accounts) == 0 || a.err != nil {
		a.add(l, funding)
		return
	}
	allocs, err := SplitAmount(l.AmountMinor, funding)
	if err != nil {
		a.err = err
		return
	}
	allocs = slices.DeleteFunc(allocs, func(al Allocation) bool { return !slices.Contains(accounts, al.AccountID) })
	l.AmountMinor = 0
	for _, al := range allocs {
		l.AmountMinor += al.AmountMinor // parts of one line's amount: no overflow
	}
	a.append(l, allocs)
}

// addCap appends the monthly-cap line, split in proportion to each account's charges
// so far, so the accounts that were charged are the ones relieved.
func (a *statementAssembler) addCap(amountMinor int64) {
	if a.err != nil {
		return
	}
	weights := make([]int64, len(a.rec.AccountTotals))
	for i, t := range a.rec.AccountTotals {
		weights[i] = max(t.AmountMinor, 0)
	}
	parts, ok := apportion(amountMinor, weights)
	if !ok {
		a.err = beamledger.InvalidField("monthly_cap_minor", "cannot be split across the funding accounts")
		return
	}
	allocs := make([]Allocation, len(parts))
	for i, t := range a.rec.AccountTotals {
		allocs[i] = Allocation{AccountID: t.AccountID, AmountMinor: parts[i]}
	}
	a.append(StatementLine{Component: ComponentMonthlyCap, Rule: ChargeRuleMonthlyCap, AmountMinor: amountMinor}, allocs)
}

// append numbers the line and adds it to the totals, refusing sums beyond int64.
func (a *statementAssembler) append(l StatementLine, allocs []Allocation) {
	l.LineNo, l.Allocations = len(a.rec.Lines)+1, allocs
	a.rec.Lines = append(a.rec.Lines, l)
	var ok bool
	if a.rec.TotalMinor, ok = addMinor(a.rec.TotalMinor, l.AmountMinor); !ok {
		a.err = beamledger.Invalid("the statement's total is beyond what money may hold", nil)
	}
	for _, al := range allocs {
		i := slices.IndexFunc(a.rec.AccountTotals, func(t Allocation) bool { return t.AccountID == al.AccountID })
		if i < 0 {
			a.rec.AccountTotals = append(a.rec.AccountTotals, Allocation{AccountID: al.AccountID})
			i = len(a.rec.AccountTotals) - 1
		}
		if a.rec.AccountTotals[i].AmountMinor, ok = addMinor(a.rec.AccountTotals[i].AmountMinor, al.AmountMinor); !ok {
			a.err = beamledger.Invalid("a funding account's total is beyond what money may hold", nil)
		}
	}
}

// componentTotals sums lines per component in componentOrder; ok is false when a sum
// is beyond int64.
func componentTotals(lines []StatementLine) (out []ComponentTotal, ok bool) {
	for _, c := range componentOrder {
		present, sum := false, int64(0)
		for _, l := range lines {
			if l.Component == c {
				if sum, ok = addMinor(sum, l.AmountMinor); !ok {
					return nil, false
				}
				present = true
			}
		}
		if present {
			out = append(out, ComponentTotal{Component: c, AmountMinor: sum})
		}
	}
	return out, true
}

// validate checks the input, naming fields by their JSON paths.
func (in StatementInput) validate() error {
	fe := beamledger.FieldErrors{}
	if strings.TrimSpace(in.ID) == "" {
		fe.Add("id", "is required")
	}
	if strings.TrimSpace(in.ProjectID) == "" {
		fe.Add("project_id", "is required")
	}
	if !currencyCode.MatchString(in.Currency) {
		fe.Add("currency", "must be an ISO 4217 code such as EUR")
	}
	if !in.PeriodStart.Before(in.PeriodEnd) {
		fe.Add("period_end", "must be after period_start")
	}
	if in.MonthlyCapMinor < 0 || in.MonthlyCapMinor > maxAmountMinor {
		fe.Add("monthly_cap_minor", fmt.Sprintf("must be between 0 (no cap) and %d", int64(maxAmountMinor)))
	}
	inPeriod := func(t time.Time) bool { return !t.Before(in.PeriodStart) && t.Before(in.PeriodEnd) }
	for i, c := range in.Charges {
		// Named only when something is wrong: a month's statement has thousands of charges.
		at := func() string { return fmt.Sprintf("charges[%d].", i) }
		if !inPeriod(c.Start) {
			fe.Add(at()+"start", "lies outside the statement's period")
		}
		for j, l := range c.Lines {
			if l.Currency != in.Currency {
				fe.Add(fmt.Sprintf("%slines[%d].currency", at(), j), "differs from the statement's currency "+in.Currency)
			}
			if l.AmountMinor < 0 || l.Minutes < 0 {
				fe.Add(fmt.Sprintf("%slines[%d].amount_minor", at(), j), "a computed charge is never negative; credits are adjustments")
			}
		}
		if err := ValidateShares(c.Funding); err != nil {
			fe.Add(at()+"funding", beamledger.FieldReason(err))
		}
	}
	for i, adj := range in.Adjustments {
		at := fmt.Sprintf("adjustments[%d].", i)
		if !inPeriod(adj.At) {
			fe.Add(at+"at", "lies outside the statement's period")
		}
		if strings.TrimSpace(adj.Reason) == "" {
			fe.Add(at+"reason", "is required: a project must be able to see why")
		}
		if adj.AmountMinor == 0 || adj.AmountMinor < -maxAmountMinor || adj.AmountMinor > maxAmountMinor {
			fe.Add(at+"amount_minor", fmt.Sprintf("must be non-zero and within ±%d", int64(maxAmountMinor)))
		}
		if err := ValidateShares(adj.Funding); err != nil {
			fe.Add(at+"funding", beamledger.FieldReason(err))
		}
	}
	return fe.Err()
}

// Issue returns the statement issued at the given instant. An issued statement is
// final: issuing it again is ErrConflict, and corrections become adjustments in a
// later period naming it in CorrectsStatementID.
func (s Statement) Issue(at time.Time) (Statement, error) {
	if s.rec.Status == StatementIssued {
		return s, beamledger.Conflict("statement %s was issued at %s and cannot change; record corrections as adjustments in a later period",
			s.rec.ID, s.rec.IssuedAt.UTC().Format(time.RFC3339))
	}
	if s.rec.ID == "" {
		return s, beamledger.InvalidField("id", "an empty statement cannot be issued; assemble it first")
	}
	rec := s.Record()
	rec.Status, rec.IssuedAt = StatementIssued, &at
	return Statement{rec: rec}, nil
}

// Status is draft or issued.
func (s Statement) Status() StatementStatus { return s.rec.Status }

// Record returns a deep copy of the statement's data.
func (s Statement) Record() StatementRecord {
	r := s.rec
	if r.IssuedAt != nil {
		at := *r.IssuedAt
		r.IssuedAt = &at
	}
	r.Lines = slices.Clone(r.Lines)
	for i := range r.Lines {
		r.Lines[i].Allocations = slices.Clone(r.Lines[i].Allocations)
	}
	r.ComponentTotals = slices.Clone(r.ComponentTotals)
	r.AccountTotals = slices.Clone(r.AccountTotals)
	return r
}

// Lines returns a copy of the statement's lines.
func (s Statement) Lines() []StatementLine { return s.Record().Lines }

// Summary is the statement's record without its lines (Lines is nil): its totals and
// status, for what stores or lists statements without copying every line.
func (s Statement) Summary() StatementRecord {
	r := s.rec
	r.Lines = nil
	if r.IssuedAt != nil {
		at := *r.IssuedAt
		r.IssuedAt = &at
	}
	r.ComponentTotals = slices.Clone(r.ComponentTotals)
	r.AccountTotals = slices.Clone(r.AccountTotals)
	return r
}

// InstrumentTotals sums, per instrument, the amounts of the lines naming one.
func (s Statement) InstrumentTotals() map[string]int64 {
	out := map[string]int64{}
	for _, l := range s.rec.Lines {
		if l.InstrumentID != "" {
			out[l.InstrumentID] += l.AmountMinor
		}
	}
	return out
}

// AppendCanonicalJSON appends the record's RFC 8785 canonical JSON to dst, as
// StatementRecord.AppendCanonicalJSON does, without copying the record first.
func (s Statement) AppendCanonicalJSON(dst []byte) ([]byte, error) {
	return s.rec.AppendCanonicalJSON(dst)
}

// MarshalJSON writes the statement as its record.
func (s Statement) MarshalJSON() ([]byte, error) { return json.Marshal(s.rec) }

// RestoreStatement turns a stored record back into a Statement, refusing one whose
// numbers do not add up (lines to the total, allocations to their line, lines to the
// component and account totals), so a statement read back is one that could have been
// assembled.
func RestoreStatement(rec StatementRecord) (Statement, error) {
	s := Statement{rec: rec}
	s.rec = s.Record() // own every slice
	if rec.Status != StatementDraft && rec.Status != StatementIssued {
		return Statement{}, beamledger.InvalidField("status", "must be draft or issued")
	}
	if (rec.Status == StatementIssued) != (rec.IssuedAt != nil) {
		return Statement{}, beamledger.InvalidField("issued_at", "is set exactly when the statement is issued")
	}
	var check statementAssembler
	for _, l := range rec.Lines {
		var sum int64
		ok := true
		for _, al := range l.Allocations {
			if sum, ok = addMinor(sum, al.AmountMinor); !ok {
				break
			}
		}
		if !ok || sum != l.AmountMinor {
			return Statement{}, beamledger.InvalidField("lines", fmt.Sprintf("line %d's allocations do not sum to its amount", l.LineNo))
		}
		check.append(l, l.Allocations)
	}
	components, ok := componentTotals(rec.Lines)
	if check.err != nil || !ok || check.rec.TotalMinor != rec.TotalMinor ||
		!slices.Equal(check.rec.AccountTotals, rec.AccountTotals) ||
		!slices.Equal(components, rec.ComponentTotals) {
		return Statement{}, beamledger.InvalidField("total_minor", "the totals do not match the lines")
	}
	return s, nil
}
