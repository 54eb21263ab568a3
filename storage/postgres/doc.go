// Package postgres is beamledger's storage on PostgreSQL through pgx: every SQL
// statement of the product lives here, beside the method that runs it, one file per
// aggregate. It implements the Store interfaces of the domain packages and turns
// driver errors into domain errors in one function (mapError), by SQLSTATE, never by
// matching message text. It is the only package that imports pgx.
package postgres
