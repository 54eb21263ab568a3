package server

import (
	"errors"
	"log/slog"
	"net/http"
	"strconv"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/storage/postgres"
)

// errorBody is the one JSON shape of every error answer.
type errorBody struct {
	Error errorDetail `json:"error"`
}

type errorDetail struct {
	Code    string            `json:"code"`
	Message string            `json:"message"`
	Fields  map[string]string `json:"fields,omitempty"`
	// Rule names the facility rule that refused a well-formed request (status 422).
	Rule      string `json:"rule,omitempty"`
	RequestID string `json:"request_id"`
}

// errorStatus is the one table from domain error kinds to HTTP statuses and codes.
var errorStatus = []struct {
	kind   error
	status int
	code   string
}{
	{beamledger.ErrInvalid, http.StatusBadRequest, "invalid"},
	{beamledger.ErrRule, http.StatusUnprocessableEntity, "invalid"},
	{beamledger.ErrUnauthorized, http.StatusUnauthorized, "unauthorized"},
	{beamledger.ErrForbidden, http.StatusForbidden, "forbidden"},
	{beamledger.ErrNotFound, http.StatusNotFound, "not_found"},
	{beamledger.ErrConflict, http.StatusConflict, "conflict"},
	{beamledger.ErrTooLarge, http.StatusRequestEntityTooLarge, "too_large"},
	{beamledger.ErrRateLimited, http.StatusTooManyRequests, "rate_limited"},
	{beamledger.ErrUnavailable, http.StatusServiceUnavailable, "unavailable"},
	{beamledger.ErrRangeNotSatisfiable, http.StatusRequestedRangeNotSatisfiable, "range_not_satisfiable"},
}

// echoStatusCodes words echo's own errors (no route, wrong method, body too large).
var echoStatusCodes = map[int]string{
	http.StatusBadRequest:            "invalid",
	http.StatusUnauthorized:          "unauthorized",
	http.StatusForbidden:             "forbidden",
	http.StatusNotFound:              "not_found",
	http.StatusMethodNotAllowed:      "not_found",
	http.StatusConflict:              "conflict",
	http.StatusRequestEntityTooLarge: "too_large",
	http.StatusUnsupportedMediaType:  "invalid",
	http.StatusTooManyRequests:       "rate_limited",
	http.StatusServiceUnavailable:    "unavailable",
}

// errDatabaseUnreachable answers a request that failed because the database could
// not be reached: 503, for a client to try again once it is back.
var errDatabaseUnreachable = &beamledger.Error{Kind: beamledger.ErrUnavailable,
	Message: "the database cannot be reached just now; try again in a few seconds", RetryAfter: 2 * time.Second}

// handleError is echo's HTTPErrorHandler: every error answer goes through here.
func (s *Server) handleError(err error, c echo.Context) {
	if c.Response().Committed {
		return
	}
	// Errors already worded (an object store that is away, say) keep their words.
	var worded *beamledger.Error
	if !errors.As(err, &worded) && postgres.Unreachable(err) {
		s.log.WarnContext(c.Request().Context(), "database unreachable", slog.String("request_id", requestID(c)), slog.Any("error", err))
		err = errDatabaseUnreachable
	}
	status, body := s.describeError(err, c)
	if d, ok := retryAfter(err); ok {
		c.Response().Header().Set("Retry-After", strconv.Itoa(d))
	}
	if status == http.StatusUnauthorized {
		c.Response().Header().Set("WWW-Authenticate", `Bearer realm="beamledger"`)
	}
	if c.Request().Method == http.MethodHead {
		_ = c.NoContent(status)
		return
	}
	_ = c.JSON(status, body)
}

func (s *Server) describeError(err error, c echo.Context) (int, errorBody) {
	rid := requestID(c)
	var de *beamledger.Error
	for _, row := range errorStatus {
		if errors.Is(err, row.kind) {
			d := errorDetail{Code: row.code, Message: row.kind.Error(), RequestID: rid}
			if errors.As(err, &de) {
				d.Message, d.Fields, d.Rule = de.Message, de.Fields, de.Rule
			}
			return row.status, errorBody{d}
		}
	}
	var he *echo.HTTPError
	if errors.As(err, &he) {
		if code, ok := echoStatusCodes[he.Code]; ok {
			msg := http.StatusText(he.Code)
			if m, ok := he.Message.(string); ok && he.Code != http.StatusInternalServerError {
				msg = m
			}
			return he.Code, errorBody{errorDetail{Code: code, Message: msg, RequestID: rid}}
		}
	}
	// Unknown: log it in full with the request id, answer with nothing from inside.
	s.log.ErrorContext(c.Request().Context(), "internal error", slog.String("request_id", rid), slog.Any("error", err))
	return http.StatusInternalServerError, errorBody{errorDetail{
		Code: "internal", Message: "internal error; quote the request id when reporting it", RequestID: rid,
	}}
}

func retryAfter(err error) (int, bool) {
	var de *beamledger.Error
	if errors.As(err, &de) && de.RetryAfter > 0 {
		secs := int(de.RetryAfter.Seconds())
		if float64(secs) < de.RetryAfter.Seconds() {
			secs++
		}
		return secs, true
	}
	return 0, false
}
