package postgres_test

import (
	"context"
	"errors"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	"beamledger"
	"beamledger/accounts"
	"beamledger/scheduling"
	"beamledger/storage/postgres/pgtest"
)

func TestCreateInstrumentRoundTrip(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	// Detector order is the instrument's own (as listed at the column), not alphabetical.
	detectors := []scheduling.Detector{
		{Name: "HAADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: ptr(2.5e-3), OuterRadiusM: ptr(10e-3)},
		{Name: "ABF", Kind: scheduling.DetectorAnnular, InnerRadiusM: ptr(0.0), OuterRadiusM: ptr(1.25e-3)},
		{Name: "EELS", Kind: scheduling.DetectorSpectrometer},
		{Name: "4D camera", Kind: scheduling.DetectorPixelated, OuterRadiusM: ptr(7.5e-3)},
	}
	want := scheduling.Instrument{
		Code: "ARM-300", Name: "Probe-corrected STEM", Kind: scheduling.KindSTEM, Location: "Room B.12",
		Bookable: false, AcceleratingVoltagesV: []float64{60e3, 200e3, 300e3},
		Corrector: scheduling.CorrectorProbeAndImage, Detectors: detectors,
		CameraLengthMinM: ptr(0.02), CameraLengthMaxM: ptr(2.5), ConditionChecks: scheduling.ConditionChecksWarning,
	}
	got, err := db.CreateInstrument(ctx, want, "setup", time.Now())
	if err != nil {
		t.Fatal(err)
	}
	check := func(label string, got scheduling.Instrument) {
		t.Helper()
		if !accounts.ValidID(got.ID) || got.CreatedAt.IsZero() || got.UpdatedAt.IsZero() {
			t.Errorf("%s: id/timestamps %q %v %v", label, got.ID, got.CreatedAt, got.UpdatedAt)
		}
		w := want
		w.ID, w.CreatedAt, w.UpdatedAt = got.ID, got.CreatedAt, got.UpdatedAt
		if !reflect.DeepEqual(got, w) {
			t.Errorf("%s =\n %+v\nwant\n %+v", label, got, w)
		}
		for i, d := range got.Detectors {
			if (d.InnerRadiusM == nil) != (detectors[i].InnerRadiusM == nil) || (d.OuterRadiusM == nil) != (detectors[i].OuterRadiusM == nil) {
				t.Errorf("%s: detector %s radii set/unset differ: %+v", label, d.Name, d)
			}
		}
	}
	check("CreateInstrument", got)
	byID, err := db.Instrument(ctx, got.ID)
	if err != nil {
		t.Fatal(err)
	}
	check("Instrument", byID)
	byCode, err := db.InstrumentByCode(ctx, "ARM-300")
	if err != nil {
		t.Fatal(err)
	}
	check("InstrumentByCode", byCode)
}

// A tool without a beam (a plasma cleaner) has no voltages and no detectors.
func TestCreateInstrumentWithoutVoltagesOrDetectors(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	got, err := db.CreateInstrument(context.Background(), scheduling.Instrument{
		Code: "PLASMA-1", Name: "Plasma cleaner", Kind: scheduling.KindOther, Bookable: true, Corrector: scheduling.CorrectorNone,
	}, "setup", time.Now())
	if err != nil {
		t.Fatalf("CreateInstrument with nil voltages: %v", err)
	}
	if len(got.AcceleratingVoltagesV) != 0 || len(got.Detectors) != 0 || got.Corrector != scheduling.CorrectorNone {
		t.Errorf("created = %+v", got)
	}
}

func TestInstrumentRefusals(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	mustCreateInstrument(t, db, "ARM-300")
	base := func(code string, ds ...scheduling.Detector) scheduling.Instrument {
		return scheduling.Instrument{Code: code, Name: "N", Kind: scheduling.KindSTEM, Corrector: scheduling.CorrectorNone, Detectors: ds}
	}

	_, err := db.CreateInstrument(ctx, base("ARM-300"), "setup", time.Now())
	wantKind(t, err, beamledger.ErrConflict)
	if !strings.Contains(err.Error(), "code is taken") {
		t.Errorf("message %q does not say the code is taken", err)
	}

	// The schema refuses what Normalize would have: it is the last line, not the only one.
	for name, d := range map[string]scheduling.Detector{
		"inner equals outer": {Name: "ADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: ptr(5e-3), OuterRadiusM: ptr(5e-3)},
		"inner above outer":  {Name: "ADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: ptr(6e-3), OuterRadiusM: ptr(5e-3)},
		"negative inner":     {Name: "ADF", Kind: scheduling.DetectorAnnular, InnerRadiusM: ptr(-1e-3)},
		"zero outer":         {Name: "ADF", Kind: scheduling.DetectorAnnular, OuterRadiusM: ptr(0.0)},
		"unknown kind":       {Name: "ADF", Kind: "ring"},
	} {
		_, err := db.CreateInstrument(ctx, base("NEW-1", scheduling.Detector{Name: "BF", Kind: scheduling.DetectorAnnular}, d), "setup", time.Now())
		if !errors.Is(err, beamledger.ErrInvalid) {
			t.Errorf("%s: error = %v, want ErrInvalid", name, err)
		}
	}
	// The instrument row inserted before the bad detector was rolled back with it.
	ins, err := db.Instruments(ctx)
	if err != nil {
		t.Fatal(err)
	}
	var codes []string
	for _, in := range ins {
		codes = append(codes, in.Code)
	}
	if !slices.Equal(codes, []string{"ARM-300"}) {
		t.Errorf("Instruments = %v, want only ARM-300", codes)
	}
}

func TestInstrumentLookups(t *testing.T) {
	t.Parallel()
	db := pgtest.Open(t)
	ctx := context.Background()
	for _, code := range []string{"TEM-2", "ARM-300", "SEM-1"} {
		mustCreateInstrument(t, db, code)
	}
	ins, err := db.Instruments(ctx)
	if err != nil {
		t.Fatal(err)
	}
	var codes []string
	for _, in := range ins {
		codes = append(codes, in.Code)
	}
	if !slices.Equal(codes, []string{"ARM-300", "SEM-1", "TEM-2"}) {
		t.Errorf("Instruments = %v, want ordered by code", codes)
	}
	for _, id := range []string{unknownID, "ARM-300", ""} {
		_, err := db.Instrument(ctx, id)
		wantKind(t, err, beamledger.ErrNotFound)
	}
	_, err = db.InstrumentByCode(ctx, "NONE-1")
	wantKind(t, err, beamledger.ErrNotFound)
}
