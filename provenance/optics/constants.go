package optics

// ConstantsEdition names the edition of the fundamental constants below. Changing any
// constant means changing this name too, since stored derivations cite it.
const ConstantsEdition = "CODATA 2018"

// CODATA 2018 values. h, e and c are exact in the 2019 SI; the electron's mass and rest
// energy are measured values of that edition.
const (
	PlanckJS             = 6.62607015e-34   // h, exact
	ElementaryChargeC    = 1.602176634e-19  // e, exact
	SpeedOfLightMPerS    = 299792458.0      // c, exact
	ElectronMassKg       = 9.1093837015e-31 // m₀, measured
	ElectronRestEnergyEV = 0.51099895000e6  // m₀c² in eV, measured
)

// SquareAngstromsPerSquareM converts areas: fluence is quoted per Å², and confusing
// Å² with nm² (a factor 100) is a classic slip.
const SquareAngstromsPerSquareM = 1e20
