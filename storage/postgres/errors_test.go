package postgres

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"beamledger"
)

func TestMapErrorKinds(t *testing.T) {
	t.Parallel()
	pg := func(code, constraint string) *pgconn.PgError {
		return &pgconn.PgError{
			Code: code, ConstraintName: constraint, TableName: "users",
			Message: "SQL detail that must not reach a user",
		}
	}
	tests := []struct {
		name     string
		err      error
		kind     error
		contains string
	}{
		{"no rows", pgx.ErrNoRows, beamledger.ErrNotFound, "user not found"},
		{"wrapped no rows", fmt.Errorf("scan: %w", pgx.ErrNoRows), beamledger.ErrNotFound, "user not found"},
		{"unique email", pg("23505", "users_email_key"), beamledger.ErrConflict, "email is taken"},
		{"unique project code", pg("23505", "projects_code_key"), beamledger.ErrConflict, "code is taken"},
		{"unique instrument code", pg("23505", "instruments_code_key"), beamledger.ErrConflict, "code is taken"},
		{"unique other", pg("23505", "detectors_pkey"), beamledger.ErrConflict, "duplicate"},
		{"wrapped unique", fmt.Errorf("insert: %w", pg("23505", "users_email_key")), beamledger.ErrConflict, "email is taken"},
		{"exclusion", pg("23P01", "bookings_no_overlap"), beamledger.ErrConflict, "overlaps"},
		{"foreign key", pg("23503", "projects_principal_investigator_id_fkey"), beamledger.ErrInvalid, "does not exist"},
		{"check", pg("23514", "users_email_check"), beamledger.ErrInvalid, "breaks a rule"},
		{"not null", pg("23502", ""), beamledger.ErrInvalid, "breaks a rule"},
		{"serialization", pg("40001", ""), beamledger.ErrUnavailable, "try again"},
		{"deadlock", pg("40P01", ""), beamledger.ErrUnavailable, "try again"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			t.Parallel()
			got := mapError(tt.err, "user")
			if !errors.Is(got, tt.kind) {
				t.Fatalf("mapError(%v) = %v, want kind %v", tt.err, got, tt.kind)
			}
			var e *beamledger.Error
			if !errors.As(got, &e) {
				t.Fatalf("mapError(%v) = %T, want *beamledger.Error", tt.err, got)
			}
			if !strings.Contains(e.Message, tt.contains) {
				t.Errorf("message %q does not contain %q", e.Message, tt.contains)
			}
			if strings.Contains(e.Message, "SQL detail") || strings.Contains(e.Message, "users") {
				t.Errorf("message %q leaks the driver's message or a table or constraint name", e.Message)
			}
			// Exactly one kind: a conflict must not also read as not found, and so on.
			for _, other := range []error{beamledger.ErrNotFound, beamledger.ErrConflict, beamledger.ErrInvalid, beamledger.ErrUnavailable} {
				if other != tt.kind && errors.Is(got, other) {
					t.Errorf("mapError(%v) also matches %v", tt.err, other)
				}
			}
		})
	}
}

func TestMapErrorPassesUnknownErrorsThrough(t *testing.T) {
	t.Parallel()
	if got := mapError(nil, "user"); got != nil {
		t.Fatalf("mapError(nil) = %v, want nil", got)
	}
	plain := errors.New("connection reset")
	canceled := &pgconn.PgError{Code: "57014", Message: "canceling statement due to user request"}
	badText := fmt.Errorf("query: %w", &pgconn.PgError{Code: "22P02"})
	for _, err := range []error{plain, canceled, badText} {
		got := mapError(err, "user")
		if got != err {
			t.Errorf("mapError(%v) = %v (%T), want the error itself", err, got, got)
		}
		var e *beamledger.Error
		if errors.As(got, &e) {
			t.Errorf("mapError(%v) became a domain error %v", err, e)
		}
	}
}

// TestUnreachable separates a database that is gone from faults of a request.
// SQLSTATE codes: [published: PostgreSQL 15 documentation, Appendix A].
func TestUnreachable(t *testing.T) {
	t.Parallel()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	// Nothing listens on port 1 of the loopback address.
	_, dialErr := pgx.Connect(ctx, "postgres://nobody@127.0.0.1:1/none?connect_timeout=2")
	for _, c := range []struct {
		name string
		err  error
		want bool
	}{
		{"connection refused", dialErr, true},
		{"admin shutdown 57P01", &pgconn.PgError{Code: "57P01"}, true},
		{"crash shutdown 57P02", &pgconn.PgError{Code: "57P02"}, true},
		{"starting up 57P03", &pgconn.PgError{Code: "57P03"}, true},
		{"connection failure 08006", fmt.Errorf("query: %w", &pgconn.PgError{Code: "08006"}), true},
		{"unexpected EOF", fmt.Errorf("read: %w", io.ErrUnexpectedEOF), true},
		{"unique violation 23505", &pgconn.PgError{Code: "23505"}, false},
		{"syntax error 42601", &pgconn.PgError{Code: "42601"}, false},
		{"no rows", pgx.ErrNoRows, false},
		{"a domain error", beamledger.Conflict("taken"), false},
		{"nil", nil, false},
	} {
		if c.name == "connection refused" && c.err == nil {
			t.Fatal("connecting to a closed port worked")
		}
		if got := Unreachable(c.err); got != c.want {
			t.Errorf("%s: Unreachable(%v) = %v", c.name, c.err, got)
		}
	}
}
