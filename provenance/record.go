package provenance

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/provenance/optics"
	"beamledger/provenance/quantity"
	"beamledger/scheduling"
)

// BookingRef is what an acquisition needs to know of its booking.
type BookingRef struct {
	ID           string
	InstrumentID string
	ProjectID    string // empty for service time
	UserID       string
	StaffID      string
	Kind         scheduling.BookingKind
	Start, End   time.Time
	Cancelled    bool
}

// OperatorRef is what an acquisition needs to know of its operator.
type OperatorRef struct {
	ID       string
	Role     accounts.Role
	Disabled bool
	// Member says whether the operator belongs to the booking's project.
	Member bool
}

// AcquisitionContext is the stored state an acquisition is recorded against, read in
// the transaction that writes it.
type AcquisitionContext struct {
	Booking    BookingRef
	Instrument scheduling.Instrument
	Operator   OperatorRef
	// Specimen, when named, with FluenceUsedEPerA2 summing every other acquisition.
	Specimen *Specimen
	// FluenceBeforeEPerA2 sums the specimen's other acquisitions that started before
	// this one: the dose the specimen had taken when this one began.
	FluenceBeforeEPerA2 float64
	// Tuning in force at the start, for the acquisition's voltage; nil when none.
	Tuning *Tuning
	// Calibrations in force at the start: per kind and subject the newest not corrected.
	Calibrations []Calibration
	Settings     optics.Settings
	// Latest is the current version when correcting.
	Latest *AcquisitionVersion
	Now    time.Time
}

// Draft is a version ready to store.
type Draft struct {
	AcquisitionVersion
}

// clockSkew is how far in the future an acquisition may end: instrument PCs drift.
const clockSkew = 5 * time.Minute

// Record checks an acquisition against its booking, operator, specimen and instrument,
// applies the calibrations and tuning in force, derives what follows from the
// conditions, and weighs the specimen's fluence budget. in has passed Normalize.
func Record(ac AcquisitionContext, in AcquisitionInput) (Draft, error) {
	b := ac.Booking
	switch {
	case b.ProjectID == "":
		return Draft{}, beamledger.RuleViolation("acquisition_booking", "service time records no acquisitions; book the work on a project",
			map[string]string{"booking_id": "is a service booking"})
	case b.Cancelled:
		return Draft{}, beamledger.RuleViolation("acquisition_booking", "the booking was cancelled",
			map[string]string{"booking_id": "is cancelled"})
	case in.StartedAt.Before(b.Start) || !in.StartedAt.Before(b.End):
		return Draft{}, beamledger.RuleViolation("acquisition_within_booking",
			fmt.Sprintf("an acquisition starts inside its booking (%s to %s)", b.Start.UTC().Format(time.RFC3339), b.End.UTC().Format(time.RFC3339)),
			map[string]string{"started_at": "is outside the booking"})
	case in.EndedAt.After(ac.Now.Add(clockSkew)):
		return Draft{}, beamledger.InvalidField("ended_at", "is in the future; record an acquisition once it has ended")
	}
	if err := checkOperator(ac); err != nil {
		return Draft{}, err
	}
	if ac.Specimen != nil && ac.Specimen.ProjectID != b.ProjectID {
		return Draft{}, beamledger.InvalidField("specimen_id", "belongs to another project")
	}

	entered, effective, applied, err := resolveConditions(in.Conditions, ac)
	if err != nil {
		return Draft{}, err
	}
	warnings, err := checkAgainstInstrument(entered, ac.Instrument)
	if err != nil {
		return Draft{}, err
	}
	derived := effective.Derive(ac.Settings)
	derivedJSON, err := json.Marshal(derived)
	if err != nil {
		return Draft{}, err
	}
	conditionsJSON, err := json.Marshal(entered)
	if err != nil {
		return Draft{}, err
	}
	fluence := fluenceOf(derivedJSON)
	warnings = append(warnings, budgetWarnings(ac.Specimen, ac.FluenceBeforeEPerA2, fluence)...)

	d := Draft{AcquisitionVersion: AcquisitionVersion{
		OperatorID: ac.Operator.ID, StartedAt: in.StartedAt.UTC(), EndedAt: in.EndedAt.UTC(),
		Notes: strings.TrimSpace(in.Notes), Conditions: conditionsJSON, Derived: derivedJSON,
		FluenceEPerA2: fluence, Applied: applied, Warnings: warnings, Reason: in.Reason,
		CalibrationIDs: []string{}, CreatedAt: ac.Now.UTC(),
	}}
	if ac.Specimen != nil {
		d.SpecimenID = &ac.Specimen.ID
	}
	if ac.Tuning != nil {
		d.TuningID = &ac.Tuning.ID
	}
	for _, c := range ac.Calibrations {
		d.CalibrationIDs = append(d.CalibrationIDs, c.ID)
	}
	return d, nil
}

// checkOperator accepts as operator the booked user, the assisting staff member, a
// member of the project, or any active staff member or manager.
func checkOperator(ac AcquisitionContext) error {
	op := ac.Operator
	switch {
	case op.Disabled:
		return beamledger.InvalidField("operator_id", "is a disabled account")
	case op.ID == ac.Booking.UserID || op.ID == ac.Booking.StaffID || op.Member || op.Role.FacilityWide():
		return nil
	}
	return beamledger.InvalidField("operator_id", "must be the booked user, a member of the project, or staff")
}

// resolveConditions reads the conditions twice: as entered (with detectors named only
// by name filled from the instrument or a calibration, so they can be stored), and as
// used for deriving, where a calibrated camera length replaces the nominal one and the
// tuning in force supplies aberrations the client did not give.
func resolveConditions(raw json.RawMessage, ac AcquisitionContext) (entered, effective Conditions, applied []Applied, err error) {
	var fields map[string]json.RawMessage
	if err := json.Unmarshal(raw, &fields); err != nil || fields == nil {
		return entered, effective, nil, beamledger.InvalidField("conditions", "must be a JSON object")
	}
	applied = []Applied{}
	if rawDet, ok := fields["detectors"]; ok {
		filled, notes, err := fillDetectors(rawDet, ac)
		if err != nil {
			return entered, effective, nil, err
		}
		fields["detectors"], applied = filled, append(applied, notes...)
	}
	if entered, err = parsePrefixed(fields); err != nil {
		return entered, effective, nil, err
	}
	if l, ok := entered.CameraLengthM(); ok {
		for _, c := range ac.Calibrations {
			if c.Kind == CalibrationCameraLength && math.Abs(*c.NominalCameraLengthM-l) <= 5e-3*l {
				fields["camera_length"] = number(*c.CameraLengthM)
				applied = append(applied, Applied{Field: "camera_length", Source: "calibration", ID: c.ID,
					Detail: fmt.Sprintf("nominal %s mm measured as %s mm", mm(*c.NominalCameraLengthM), mm(*c.CameraLengthM))})
				break
			}
		}
	}
	if _, given := fields["aberrations"]; !given && ac.Tuning != nil {
		ab := map[string]string{}
		for _, co := range ac.Tuning.Coefficients {
			ab[co.Name] = strconv.FormatFloat(co.MagnitudeM, 'g', -1, 64) + " m"
		}
		fields["aberrations"], _ = json.Marshal(ab)
		applied = append(applied, Applied{Field: "aberrations", Source: "tuning", ID: ac.Tuning.ID,
			Detail: "coefficients measured " + ac.Tuning.MeasuredAt.UTC().Format(time.RFC3339)})
	}
	if effective, err = parsePrefixed(fields); err != nil {
		return entered, effective, nil, err
	}
	return entered, effective, applied, nil
}

// parsePrefixed parses conditions, naming any bad field under "conditions.".
func parsePrefixed(fields map[string]json.RawMessage) (Conditions, error) {
	raw, err := json.Marshal(fields)
	if err != nil {
		return Conditions{}, err
	}
	c, err := ParseConditions(raw)
	return c, underConditions(err)
}

// underConditions moves ParseConditions' field names under "conditions." (the key the
// conditions travel in), leaving "conditions" itself as it is.
func underConditions(err error) error {
	var e *beamledger.Error
	if !errors.As(err, &e) || len(e.Fields) == 0 {
		return err
	}
	fe := beamledger.FieldErrors{}
	for k, v := range e.Fields {
		if k != "conditions" {
			k = "conditions." + k
		}
		fe.Add(k, v)
	}
	return fe.Err()
}

// fillDetectors completes detectors given by name only: calibrated angles in force win
// over the instrument's physical radii (which need a camera length to become angles).
func fillDetectors(raw json.RawMessage, ac AcquisitionContext) (json.RawMessage, []Applied, error) {
	var dets []map[string]json.RawMessage
	if err := json.Unmarshal(raw, &dets); err != nil {
		return raw, nil, nil // not a list of objects: the parser words the error
	}
	var notes []Applied
	for i, d := range dets {
		var name string
		if err := json.Unmarshal(d["name"], &name); err != nil || len(d) != 1 {
			continue
		}
		field := fmt.Sprintf("conditions.detectors[%d]", i)
		if cal, ok := calibratedDetector(ac.Calibrations, name); ok {
			d["inner_angle"], d["outer_angle"] = text(*cal.InnerAngleRad, "mrad"), text(*cal.OuterAngleRad, "mrad")
			notes = append(notes, Applied{Field: field, Source: "calibration", ID: cal.ID,
				Detail: fmt.Sprintf("%s: measured collection angles %s–%s mrad", name, mrad(*cal.InnerAngleRad), mrad(*cal.OuterAngleRad))})
			continue
		}
		idx := slices.IndexFunc(ac.Instrument.Detectors, func(x scheduling.Detector) bool { return x.Name == name })
		if idx < 0 {
			continue // checkAgainstInstrument names the unknown detector
		}
		det := ac.Instrument.Detectors[idx]
		if det.InnerRadiusM == nil || det.OuterRadiusM == nil {
			continue // a spectrometer or camera: named, with no angles to derive
		}
		d["inner_radius"], d["outer_radius"] = text(*det.InnerRadiusM, "mm"), text(*det.OuterRadiusM, "mm")
		notes = append(notes, Applied{Field: field, Source: "instrument",
			Detail: fmt.Sprintf("%s: physical radii %s–%s mm", name, mm(*det.InnerRadiusM), mm(*det.OuterRadiusM))})
	}
	out, err := json.Marshal(dets)
	return out, notes, err
}

func calibratedDetector(cals []Calibration, name string) (Calibration, bool) {
	for _, c := range cals {
		if c.Kind == CalibrationDetectorAngles && c.Detector == name {
			return c, true
		}
	}
	return Calibration{}, false
}

// checkAgainstInstrument compares the conditions with what the instrument offers. Each
// mismatch is refused, or accepted with a warning where the instrument's condition
// checks are set to "warning".
func checkAgainstInstrument(c Conditions, in scheduling.Instrument) ([]string, error) {
	fields := map[string]string{}
	var words []string
	add := func(field, reason string) {
		fields[field] = reason
		words = append(words, field+" "+reason)
	}
	if v := c.VoltageV(); len(in.AcceleratingVoltagesV) > 0 && !slices.ContainsFunc(in.AcceleratingVoltagesV, func(o float64) bool {
		return math.Abs(o-v) <= 1e-3*o
	}) {
		offered := make([]string, len(in.AcceleratingVoltagesV))
		for i, o := range in.AcceleratingVoltagesV {
			offered[i] = strconv.FormatFloat(o/1e3, 'g', -1, 64) + " kV"
		}
		add("conditions.accelerating_voltage", "is not one the instrument offers ("+strings.Join(offered, ", ")+")")
	}
	for i, name := range c.DetectorNames() {
		if !slices.ContainsFunc(in.Detectors, func(d scheduling.Detector) bool { return d.Name == name }) {
			add(fmt.Sprintf("conditions.detectors[%d].name", i), "names no detector of "+in.Code)
		}
	}
	if l, ok := c.CameraLengthM(); ok {
		if (in.CameraLengthMinM != nil && l < *in.CameraLengthMinM*(1-1e-9)) || (in.CameraLengthMaxM != nil && l > *in.CameraLengthMaxM*(1+1e-9)) {
			add("conditions.camera_length", fmt.Sprintf("is outside the instrument's range (%s–%s mm)", mmPtr(in.CameraLengthMinM), mmPtr(in.CameraLengthMaxM)))
		}
	}
	if len(fields) == 0 {
		return []string{}, nil
	}
	if in.ConditionChecks == scheduling.ConditionChecksWarning {
		slices.Sort(words)
		return words, nil
	}
	return nil, beamledger.RuleViolation("instrument_capability", "the conditions do not match what "+in.Code+" offers", fields)
}

// budgetWarnings words a fluence budget passed by this acquisition (the dose taken
// before it began plus its own), or one that cannot be tracked because the fluence
// could not be computed. Acquisitions are weighed in the order they happened, so a
// correction of an early one does not inherit a warning a later one earned.
func budgetWarnings(sp *Specimen, before float64, fluence *float64) []string {
	if sp == nil || sp.FluenceBudgetEPerA2 == nil {
		return nil
	}
	budget := *sp.FluenceBudgetEPerA2
	if fluence == nil {
		return []string{fmt.Sprintf("specimen %s has a fluence budget of %s e⁻/Å², but this acquisition's fluence cannot be computed (give beam_current with dwell_time and pixel_size, or with exposure_time and illuminated_diameter)",
			sp.Code, eA2(budget))}
	}
	total := before + *fluence
	if total <= budget {
		return nil
	}
	return []string{fmt.Sprintf("specimen %s: cumulative fluence %s e⁻/Å² passes its budget of %s e⁻/Å² (this acquisition adds %s)",
		sp.Code, eA2(total), eA2(budget), eA2(*fluence))}
}

// fluenceOf reads the fluence from the derived object, if it was computed.
func fluenceOf(derived []byte) *float64 {
	var d struct {
		F *float64 `json:"fluence_e_per_angstrom2"`
	}
	if json.Unmarshal(derived, &d) != nil {
		return nil
	}
	return d.F
}

func number(v float64) json.RawMessage { return json.RawMessage(strconv.FormatFloat(v, 'g', -1, 64)) }

// text is a value as a quantity string in a readable unit ("6 mm", "13 mrad"), so
// that what the server filled in reads like what a person would have typed.
func text(si float64, unit string) json.RawMessage {
	q, err := quantity.FormatIn(si, unit)
	if err != nil {
		return number(si) // a stored value is finite; the number is the fallback
	}
	b, _ := json.Marshal(q)
	return b
}

func mm(m float64) string   { return strconv.FormatFloat(m*1e3, 'g', 6, 64) }
func mrad(r float64) string { return strconv.FormatFloat(r*1e3, 'g', 5, 64) }
func eA2(v float64) string  { return strconv.FormatFloat(v, 'g', 6, 64) }
func mmPtr(m *float64) string {
	if m == nil {
		return "…"
	}
	return mm(*m)
}
