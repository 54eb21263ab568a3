// Package scheduling is the domain of instrument time: instruments and their
// capabilities, and (as the product grows) qualifications, bookings, rules, usage,
// rates and charges. It is pure Go: no driver, no framework, no clock of its own.
package scheduling
