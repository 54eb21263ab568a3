// Package optics holds the electron-optics formulas beamledger derives quantities
// with: the relativistic wavelength, the interaction constant, diffraction-limited
// probe size and Nyquist sampling, fluence, collection angles and detector regimes,
// the π/4 aberration criterion and Scherzer conditions.
//
// Functions take plain SI values with the unit in the parameter name (VoltageV,
// SemiAngleRad, DwellS) and return SI values, except where the trade's own unit is the
// answer (fluence in e⁻/Å²). The physical constants are one pinned CODATA edition,
// named by ConstantsEdition, so a stored derivation can say which numbers it used.
// Every formula and its source are listed in REFERENCE.md §1; comments here say which
// convention each one follows, because textbooks differ by a few percent.
//
// The package imports only the standard library: physics tests run with no database.
package optics
