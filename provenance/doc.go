// Package provenance is the domain of what was done with the instruments and how the
// results came about: acquisitions, operating conditions, tunings, calibrations,
// specimens, data-file records, derivations, the ledger, traces and PROV export.
//
// Like scheduling it is pure Go with no driver, framework or clock of its own, so the
// rules that decide what is recorded build and test without a database. The physics
// lives in the optics subpackage and the reading of "number unit" strings in
// quantity; this package turns client JSON into checked, SI-normalised values that
// keep the text the user typed, since a record that cannot show what was entered
// cannot be trusted to have converted it correctly.
package provenance
