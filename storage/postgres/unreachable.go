package postgres

import (
	"errors"
	"io"
	"net"
	"syscall"

	"github.com/jackc/pgx/v5/pgconn"
)

// Unreachable reports whether err means the database could not be reached or
// went away mid-request (a refused or reset connection, a server shutting down or
// starting up, a connection closed under the query), as opposed to a fault in
// the request or in the code. Such an error is temporary from the client's side:
// the server answers it 503, and the pool reconnects once the database is back.
func Unreachable(err error) bool {
	if err == nil {
		return false
	}
	var pgErr *pgconn.PgError
	if errors.As(err, &pgErr) {
		switch {
		case len(pgErr.Code) == 5 && pgErr.Code[:2] == "08": // connection exception
			return true
		case pgErr.Code == "57P01", pgErr.Code == "57P02", pgErr.Code == "57P03": // admin or crash shutdown, starting up
			return true
		case pgErr.Code == "53300": // too many connections
			return true
		}
		return false
	}
	var connectErr *pgconn.ConnectError
	var netErr net.Error
	var opErr *net.OpError
	switch {
	case errors.As(err, &connectErr), errors.As(err, &opErr), errors.As(err, &netErr):
		return true
	case errors.Is(err, io.EOF), errors.Is(err, io.ErrUnexpectedEOF):
		return true
	case errors.Is(err, syscall.ECONNREFUSED), errors.Is(err, syscall.ECONNRESET), errors.Is(err, syscall.EPIPE):
		return true
	}
	// A statement sent on a connection the pool had not yet seen die.
	return pgconn.SafeToRetry(err)
}
