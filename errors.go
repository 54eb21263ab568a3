// Package beamledger holds what every part of the server shares: the error kinds that
// domain code returns and that the HTTP layer maps to status codes in one table.
//
// The domain packages (accounts, scheduling, provenance) and the storage packages
// return errors that wrap one of the sentinels below, usually through *Error, which
// also carries a message safe to show a user and the offending fields.
package beamledger

import (
	"errors"
	"fmt"
	"maps"
	"slices"
	"time"
)

// Error kinds. Each maps to exactly one HTTP status in server/errors.go.
var (
	ErrInvalid = errors.New("invalid")
	// ErrRule is well-formed input that a booking rule refuses (too long, outside
	// opening hours, not qualified…); the error names the rule.
	ErrRule         = errors.New("rule")
	ErrUnauthorized = errors.New("unauthorized")
	ErrForbidden    = errors.New("forbidden")
	ErrNotFound     = errors.New("not_found")
	ErrConflict     = errors.New("conflict")
	ErrTooLarge     = errors.New("too_large")
	ErrRateLimited  = errors.New("rate_limited")
	ErrUnavailable  = errors.New("unavailable")
	// ErrRangeNotSatisfiable is a byte range that lies outside the file asked for.
	ErrRangeNotSatisfiable = errors.New("range_not_satisfiable")
)

// Error is a domain error with a message that may be shown to the caller as is.
type Error struct {
	// Kind is one of the sentinels above; errors.Is(err, Kind) holds.
	Kind error
	// Message is safe to show to the user: no SQL, paths or stack traces.
	Message string
	// Fields names offending input fields (JSON names) with a reason each.
	Fields map[string]string
	// Rule names the facility rule that refused the request (with ErrRule).
	Rule string
	// RetryAfter, when positive, tells a rate-limited caller when to try again.
	RetryAfter time.Duration
}

func (e *Error) Error() string {
	if e.Message == "" {
		return e.Kind.Error()
	}
	return e.Message
}

// Unwrap lets errors.Is match the kind.
func (e *Error) Unwrap() error { return e.Kind }

// Invalid reports bad input. fields maps JSON field names to what is wrong with each.
func Invalid(message string, fields map[string]string) *Error {
	return &Error{Kind: ErrInvalid, Message: message, Fields: maps.Clone(fields)}
}

// InvalidField reports one bad input field.
func InvalidField(field, reason string) *Error {
	return &Error{Kind: ErrInvalid, Message: field + ": " + reason, Fields: map[string]string{field: reason}}
}

// RuleViolation reports that the named rule refuses the request. fields, when not nil,
// names the input fields concerned.
func RuleViolation(rule, message string, fields map[string]string) *Error {
	return &Error{Kind: ErrRule, Rule: rule, Message: message, Fields: maps.Clone(fields)}
}

// NotFound reports that the named thing does not exist or is not visible to the caller.
func NotFound(what string) *Error {
	return &Error{Kind: ErrNotFound, Message: what + " not found"}
}

// Conflict reports a clash with existing state.
func Conflict(format string, args ...any) *Error {
	return &Error{Kind: ErrConflict, Message: fmt.Sprintf(format, args...)}
}

// Forbidden reports that the caller may not do this.
func Forbidden(format string, args ...any) *Error {
	return &Error{Kind: ErrForbidden, Message: fmt.Sprintf(format, args...)}
}

// Unauthorized reports missing or bad credentials.
func Unauthorized(message string) *Error {
	return &Error{Kind: ErrUnauthorized, Message: message}
}

// RateLimited reports too many attempts; retry after d.
func RateLimited(message string, d time.Duration) *Error {
	return &Error{Kind: ErrRateLimited, Message: message, RetryAfter: d}
}

// Unavailable reports a temporary inability to serve, such as an overloaded resource.
func Unavailable(message string) *Error {
	return &Error{Kind: ErrUnavailable, Message: message}
}

// FieldErrors collects per-field problems and turns them into one Invalid error.
type FieldErrors map[string]string

// Add records a problem with field unless one is already recorded.
func (f FieldErrors) Add(field, reason string) {
	if _, ok := f[field]; !ok {
		f[field] = reason
	}
}

// Err returns nil when no field was reported, else an Invalid error naming them all.
func (f FieldErrors) Err() error {
	if len(f) == 0 {
		return nil
	}
	names := make([]string, 0, len(f))
	for k := range f {
		names = append(names, k)
	}
	slices.Sort(names)
	msg := "invalid input: "
	for i, k := range names {
		if i > 0 {
			msg += "; "
		}
		msg += k + ": " + f[k]
	}
	return Invalid(msg, f)
}

// FieldReason is the per-field reason of a single-field Invalid error (what a caller
// folds into its own FieldErrors), else the error's message.
func FieldReason(err error) string {
	var e *Error
	if errors.As(err, &e) {
		if len(e.Fields) == 1 {
			for _, v := range e.Fields {
				return v
			}
		}
		return e.Error()
	}
	return err.Error()
}
