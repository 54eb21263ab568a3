// Package accounts is the domain of people and credentials: users and their roles,
// projects and their members, instrument-agent tokens, the authenticated principal
// of a request, and the rules deciding who may read or change what.
//
// It is pure Go: no database driver, no HTTP framework. storage/postgres implements
// the Store interfaces declared here, and server wires them to routes.
package accounts
