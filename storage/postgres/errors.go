package postgres

import (
	"errors"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"beamledger"
)

// SQLSTATE codes this package translates.
const (
	uniqueViolation      = "23505"
	foreignKeyViolation  = "23503"
	checkViolation       = "23514"
	notNullViolation     = "23502"
	exclusionViolation   = "23P01"
	serializationFailure = "40001"
	deadlockDetected     = "40P01"
)

// mapError turns driver errors into domain errors. what names the object for messages
// ("user", "project"). Errors it does not know pass through unchanged, to be logged
// and answered with a generic 500.
func mapError(err error, what string) error {
	if err == nil {
		return nil
	}
	if errors.Is(err, pgx.ErrNoRows) {
		return beamledger.NotFound(what)
	}
	var pgErr *pgconn.PgError
	if !errors.As(err, &pgErr) {
		return err
	}
	switch pgErr.Code {
	case uniqueViolation:
		return beamledger.Conflict("%s already exists (%s)", what, constraintSubject(pgErr.ConstraintName))
	case exclusionViolation:
		return beamledger.Conflict("%s overlaps an existing one", what)
	case foreignKeyViolation:
		return beamledger.Invalid(what+" refers to something that does not exist", nil)
	case checkViolation, notNullViolation:
		// The constraint name is internal; Go-side validation words these cases better.
		return beamledger.Invalid(what+" breaks a rule of the schema", nil)
	case serializationFailure, deadlockDetected:
		return beamledger.Unavailable("the database was busy; try again")
	}
	return err
}

// constraintSubject words a unique constraint for a user, without exposing SQL.
func constraintSubject(name string) string {
	switch name {
	case "users_email_key":
		return "email is taken"
	case "projects_code_key", "instruments_code_key":
		return "code is taken"
	}
	return "duplicate"
}

// isConstraint reports whether err is a violation of the named constraint, so that a
// method can word it for its own fields before mapError's generic words apply.
func isConstraint(err error, name string) bool {
	var pgErr *pgconn.PgError
	return errors.As(err, &pgErr) && pgErr.ConstraintName == name
}
