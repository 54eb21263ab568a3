package optics

import (
	"math"
	"testing"
)

// near reports whether got rounds to want at the printed precision: |got−want| is at
// most half a unit in want's last printed digit, given as halfUnit.
func near(got, want, halfUnit float64) bool { return math.Abs(got-want) <= halfUnit }

func TestWavelengthGammaBeta(t *testing.T) {
	cases := []struct {
		voltageV, lambdaPm, gamma, beta float64
	}{
		{100e3, 3.701437, 1.195695, 0.548221}, // [computed, CODATA 2018] REFERENCE.md §1 table, 100 kV
		{200e3, 2.507934, 1.391390, 0.695314}, // [computed, CODATA 2018] REFERENCE.md §1 table, 200 kV
		{300e3, 1.968749, 1.587085, 0.776525}, // [computed, CODATA 2018] REFERENCE.md §1 table, 300 kV
	}
	for _, c := range cases {
		if got := WavelengthM(c.voltageV) * 1e12; !near(got, c.lambdaPm, 0.5e-6) { // [computed, CODATA 2018]
			t.Errorf("λ(%g V) = %.7f pm, want %.6f", c.voltageV, got, c.lambdaPm)
		}
		if got := LorentzFactor(c.voltageV); !near(got, c.gamma, 0.5e-6) { // [computed, CODATA 2018]
			t.Errorf("γ(%g V) = %.7f, want %.6f", c.voltageV, got, c.gamma)
		}
		if got := SpeedFraction(c.voltageV); !near(got, c.beta, 0.5e-6) { // [computed, CODATA 2018]
			t.Errorf("β(%g V) = %.7f, want %.6f", c.voltageV, got, c.beta)
		}
	}
	// Williams & Carter Table 1.1 lists 0.00370, 0.00251, 0.00197 nm.
	for _, c := range []struct{ v, nm float64 }{{100e3, 0.00370}, {200e3, 0.00251}, {300e3, 0.00197}} {
		if got := WavelengthM(c.v) * 1e9; !near(got, c.nm, 0.5e-5) { // [memory: Williams & Carter, 2nd ed., Table 1.1]
			t.Errorf("λ(%g V) = %.6f nm, want %.5f", c.v, got, c.nm)
		}
	}
}

func TestPracticeHundredKeV(t *testing.T) {
	if got := WavelengthM(100e3) * 1e12; !near(got, 3.7, 0.05) { // [practice] 100 keV electrons: about 3.7 pm
		t.Errorf("λ(100 kV) = %.3f pm, want about 3.7", got)
	}
	if got := SpeedFraction(100e3); !near(got, 0.5, 0.05) { // [practice] about half the speed of light
		t.Errorf("β(100 kV) = %.3f, want about 0.5", got)
	}
}

func TestInteractionConstant(t *testing.T) {
	got := InteractionConstantRadPerVM(200e3) * 1e-9 // rad V⁻¹ nm⁻¹
	if !near(got, 7.28840e-3, 0.5e-8) {              // [computed] σ(200 kV), formula [published: International Tables for Crystallography Vol. B (2006) §2.5]
		t.Errorf("σ(200 kV) = %.6e rad/(V nm), want 7.28840e-3", got)
	}
}

func TestWavelengthDecreasesWithVoltage(t *testing.T) {
	prev := math.Inf(1)
	for v := 1e3; v <= 3e6; v *= 1.07 {
		l := WavelengthM(v)
		if !(l < prev) {
			t.Fatalf("λ(%g V) = %g is not below λ at the previous voltage, %g", v, l, prev)
		}
		prev = l
	}
}

// The non-relativistic form differs by √(1 + eV/2m₀c²) − 1: negligible at 1 kV,
// 4.8 % at 100 kV (REFERENCE.md §1 formulas).
func TestRelativisticCorrection(t *testing.T) {
	gap := func(v float64) float64 { return NonRelativisticWavelengthM(v)/WavelengthM(v) - 1 }
	if g := gap(1e3); !(g > 0 && g < 1e-3) { // [computed] 0.049 % at 1 kV: the forms agree at low voltage
		t.Errorf("non-relativistic gap at 1 kV = %.4f %%, want under 0.1 %%", 100*g)
	}
	if g := gap(100e3); !near(100*g, 4.8, 0.05) { // [computed] "4.8 % off at 100 kV", REFERENCE.md §1
		t.Errorf("non-relativistic gap at 100 kV = %.3f %%, want 4.8 %%", 100*g)
	}
}

func TestProbeAndNyquist(t *testing.T) {
	l := WavelengthM(300e3)
	if got := ProbeDiameterDiffractionM(l, 25e-3) * 1e10; !near(got, 0.96075, 0.5e-5) { // [computed] 1.22λ/α at 300 kV, 25 mrad
		t.Errorf("1.22λ/α = %.6f Å, want 0.96075", got)
	}
	if got := NyquistPixelADFM(l, 25e-3) * 1e10; !near(got, 0.19687, 0.5e-5) { // [computed] ADF Nyquist pixel at 300 kV, 25 mrad
		t.Errorf("λ/4α = %.6f Å, want 0.19687", got)
	}
	// Coherent transfer reaches half as far, so its Nyquist pixel is twice the ADF one.
	if got, adf := NyquistPixelBFM(l, 25e-3), NyquistPixelADFM(l, 25e-3); !near(got/adf, 2, 1e-15) { // [computed] λ/2α = 2·λ/4α
		t.Errorf("BF/ADF Nyquist ratio = %v, want 2", got/adf)
	}
}

func TestSTEMFluence(t *testing.T) {
	electrons := 50e-12 * 2e-6 / ElementaryChargeC
	if !near(electrons, 624.1509, 0.5e-4) { // [computed] 50 pA × 2 µs = 624.1509 e⁻ per pixel
		t.Errorf("electrons per pixel = %.5f, want 624.1509", electrons)
	}
	got := STEMFluenceEPerAngstrom2(50e-12, 2e-6, 0.1e-10, 1)
	if !near(got, 62415.09, 0.005) { // [computed] 50 pA, 2 µs, 0.1 Å, 1 frame → 62 415.09 e⁻/Å²
		t.Errorf("fluence = %.3f e⁻/Å², want 62415.09", got)
	}
	// Linear in current, dwell and frames; inverse in pixel area. [constructed] scalings.
	base := STEMFluenceEPerAngstrom2(50e-12, 2e-6, 1e-10, 1)
	for _, c := range []struct {
		name  string
		got   float64
		ratio float64
	}{
		{"3× current", STEMFluenceEPerAngstrom2(150e-12, 2e-6, 1e-10, 1), 3},
		{"3× dwell", STEMFluenceEPerAngstrom2(50e-12, 6e-6, 1e-10, 1), 3},
		{"7 frames", STEMFluenceEPerAngstrom2(50e-12, 2e-6, 1e-10, 7), 7},
		{"2× pixel edge", STEMFluenceEPerAngstrom2(50e-12, 2e-6, 2e-10, 1), 0.25},
		{"0 frames counts as 1", STEMFluenceEPerAngstrom2(50e-12, 2e-6, 1e-10, 0), 1},
	} {
		if !near(c.got/base, c.ratio, 1e-12) { // [constructed] proportionality of Φ = I·τ·n/(e·Δx²)
			t.Errorf("%s: ratio %v, want %v", c.name, c.got/base, c.ratio)
		}
	}
}

func TestTEMFluence(t *testing.T) {
	// 1 nA for 1 s over a 1 µm disc: 6.2415e9 e⁻ over π/4 µm² = 7.854e7 Å².
	got := TEMFluenceEPerAngstrom2(1e-9, 1, 1e-6)
	if !near(got, 79.46936, 0.5e-5) { // [computed] Φ = I·t/(e·πd²/4) with CODATA 2018 e; inputs [constructed]
		t.Errorf("TEM fluence = %.6f e⁻/Å², want 79.46936", got)
	}
	if r := TEMFluenceEPerAngstrom2(1e-9, 1, 2e-6) / got; !near(r, 0.25, 1e-12) { // [constructed] twice the diameter, a quarter of the fluence
		t.Errorf("doubling the diameter scales fluence by %v, want 0.25", r)
	}
}

func TestCollectionAngle(t *testing.T) {
	if got := CollectionAngleRad(2e-3, 80e-3) * 1e3; !near(got, 25.000, 0.5e-3) { // [computed] r = 2 mm at L = 80 mm → 25.000 mrad
		t.Errorf("θ = %.4f mrad, want 25.000", got)
	}
	if got := CollectionAngleRad(10e-3, 80e-3) * 1e3; !near(got, 125.00, 0.5e-2) { // [computed] r = 10 mm at L = 80 mm → 125.00 mrad
		t.Errorf("θ = %.3f mrad, want 125.00", got)
	}
}

func TestScherzer(t *testing.T) {
	l := WavelengthM(200e3)
	if got := math.Sqrt(1e-3*l) * 1e9; !near(got, 50.0793, 0.5e-4) { // [computed] √(Cs λ) at 200 kV, Cs = 1.0 mm
		t.Errorf("√(Csλ) = %.5f nm, want 50.0793", got)
	}
	if got := ScherzerDefocusM(1e-3, l) * 1e9; !near(got, -57.827, 0.5e-3) { // [computed] Δf = −57.827 nm (underfocus negative) [memory: Scherzer 1949; quoted in Williams & Carter ch. 28]
		t.Errorf("Δf = %.4f nm, want −57.827", got)
	}
	if got := math.Pow(1e-3*l*l*l, 0.25) * 1e9; !near(got, 0.354395, 0.5e-6) { // [computed] (Cs λ³)^¼
		t.Errorf("(Csλ³)^¼ = %.7f nm, want 0.354395", got)
	}
	if got := ScherzerResolutionM(1e-3, l) * 1e9; !near(got, 0.23390, 0.5e-5) { // [computed] 0.66·0.354395 nm = 0.23390 nm [memory: Scherzer 1949; quoted in Williams & Carter ch. 28]
		t.Errorf("Scherzer resolution = %.6f nm, want 0.23390", got)
	}
}

func TestPiOver4(t *testing.T) {
	l := WavelengthM(300e3)
	if got := PiOver4LimitM(1, l, 25e-3) * 1e9; !near(got, 0.7875, 0.5e-4) { // [computed] |C1|, |A1| ≤ 0.7875 nm at 300 kV, 25 mrad [memory: Krivanek et al. 1999, Ultramicroscopy 78:1]
		t.Errorf("C1/A1 limit = %.5f nm, want 0.7875", got)
	}
	if got := PiOver4LimitM(3, l, 25e-3) * 1e6; !near(got, 2.520, 0.5e-3) { // [computed] |C3| ≤ 2.520 µm at 300 kV, 25 mrad [memory: Krivanek et al. 1999, Ultramicroscopy 78:1]
		t.Errorf("C3 limit = %.4f µm, want 2.520", got)
	}
	// The usable angle inverts the limit: a coefficient at its limit for α is usable to α.
	for n := 1; n <= 5; n++ {
		c := PiOver4LimitM(n, l, 25e-3)
		if got := PiOver4AngleRad(n, l, c); !near(got, 25e-3, 1e-15) { // [computed] α = ((n+1)λ/(8|C|))^(1/(n+1)) inverts |C| = (n+1)λ/(8α^(n+1))
			t.Errorf("order %d: usable angle of the limit = %v rad, want 0.025", n, got)
		}
	}
	if got := PiOver4AngleRad(3, l, 0); !math.IsInf(got, 1) { // [constructed] a zero coefficient limits nothing
		t.Errorf("usable angle of C3 = 0 is %v, want +Inf", got)
	}
}

func TestCoefficientTable(t *testing.T) {
	cases := []struct {
		name, krivanek string
		order, fold    int
		factor         float64
	}{
		// Factors: (n+1) for Haider's B2, S3, B4, D4, S5, R5 [memory: Krivanek et al. 1999, Ultramicroscopy 78:1], as REFERENCE.md §1 states.
		{"C1", "C10", 1, 0, 1}, {"A1", "C12", 1, 2, 1}, {"B2", "C21", 2, 1, 3}, {"A2", "C23", 2, 3, 1},
		{"C3", "C30", 3, 0, 1}, {"S3", "C32", 3, 2, 4}, {"A3", "C34", 3, 4, 1},
		{"B4", "C41", 4, 1, 5}, {"D4", "C43", 4, 3, 5}, {"A4", "C45", 4, 5, 1},
		{"C5", "C50", 5, 0, 1}, {"S5", "C52", 5, 2, 6}, {"R5", "C54", 5, 4, 6}, {"A5", "C56", 5, 6, 1},
		{"C21", "C21", 2, 1, 1}, {"C56", "C56", 5, 6, 1},
	}
	for _, c := range cases {
		got, ok := Coefficient(c.name)
		want := CoefficientInfo{c.name, c.krivanek, c.order, c.fold, c.factor}
		if !ok || got != want {
			t.Errorf("Coefficient(%q) = %+v, %v; want %+v", c.name, got, ok, want)
		}
	}
	for _, bad := range []string{"", "c3", "C2", "C31", "A6", "Cs"} {
		if _, ok := Coefficient(bad); ok {
			t.Errorf("Coefficient(%q) accepted", bad)
		}
	}
	if n := len(Coefficients()); n != 28 {
		t.Errorf("Coefficients() lists %d names, want 14 Haider + 14 Krivanek", n)
	}
}
