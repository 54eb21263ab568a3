package server

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"log/slog"
	"net/http"
	"regexp"
	"runtime"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
)

const requestIDHeader = "X-Request-Id"

var safeRequestID = regexp.MustCompile(`^[A-Za-z0-9._-]{8,64}$`)

// withRequestID takes a well-formed incoming request id (from a proxy) or makes one,
// and echoes it in the response.
func withRequestID(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		id := c.Request().Header.Get(requestIDHeader)
		if !safeRequestID.MatchString(id) {
			b := make([]byte, 12)
			_, _ = rand.Read(b)
			id = hex.EncodeToString(b)
		}
		c.Set(requestIDHeader, id)
		c.Response().Header().Set(requestIDHeader, id)
		c.SetRequest(c.Request().WithContext(context.WithValue(c.Request().Context(), requestIDKey{}, id)))
		return next(c)
	}
}

// requestIDKey carries the request id in a request's context.Context, where code
// below the handlers, which never sees echo.Context, still has it for its logs.
type requestIDKey struct{}

// requestIDLogHandler adds the request id to every record logged with a request's
// context (the *Context logging calls) that does not already name one, so that an
// error logged anywhere while answering a request can be found by the id its
// client was given.
type requestIDLogHandler struct{ slog.Handler }

func (h requestIDLogHandler) Handle(ctx context.Context, r slog.Record) error {
	if id, ok := ctx.Value(requestIDKey{}).(string); ok {
		named := false
		r.Attrs(func(a slog.Attr) bool {
			named = a.Key == "request_id"
			return !named
		})
		if !named {
			r = r.Clone()
			r.AddAttrs(slog.String("request_id", id))
		}
	}
	return h.Handler.Handle(ctx, r)
}

func (h requestIDLogHandler) WithAttrs(as []slog.Attr) slog.Handler {
	return requestIDLogHandler{h.Handler.WithAttrs(as)}
}

func (h requestIDLogHandler) WithGroup(name string) slog.Handler {
	return requestIDLogHandler{h.Handler.WithGroup(name)}
}

func requestID(c echo.Context) string {
	id, _ := c.Get(requestIDHeader).(string)
	return id
}

// logRequests writes one structured line per request once the answer is sent.
func (s *Server) logRequests(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		start := time.Now()
		err := next(c)
		if err != nil {
			// Let the error handler write the answer now, so the logged status is real.
			c.Error(err)
		}
		p, _ := accounts.PrincipalFrom(c.Request().Context())
		s.log.LogAttrs(c.Request().Context(), slog.LevelInfo, "request",
			slog.String("method", c.Request().Method),
			slog.String("route", c.Path()),
			slog.Int("status", c.Response().Status),
			slog.Duration("duration", time.Since(start)),
			slog.Int64("bytes_out", c.Response().Size),
			slog.String("request_id", requestID(c)),
			slog.String("principal", p.ID()),
			slog.String("remote", c.RealIP()),
		)
		return nil
	}
}

// recoverPanics turns a panic in a handler into a logged 500, keeping the process up.
func (s *Server) recoverPanics(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) (err error) {
		defer func() {
			if r := recover(); r != nil {
				buf := make([]byte, 8<<10)
				buf = buf[:runtime.Stack(buf, false)]
				s.log.ErrorContext(c.Request().Context(), "panic", slog.String("request_id", requestID(c)), slog.Any("panic", r), slog.String("stack", string(buf)))
				err = fmt.Errorf("panic: %v", r)
			}
		}()
		return next(c)
	}
}

// securityHeaders sets conservative defaults on every answer.
func securityHeaders(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		h := c.Response().Header()
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("X-Frame-Options", "DENY")
		h.Set("Referrer-Policy", "same-origin")
		h.Set("Content-Security-Policy", "default-src 'self'; frame-ancestors 'none'; base-uri 'none'; form-action 'self'")
		return next(c)
	}
}

// limitBody caps request bodies so a client cannot make the server read without end.
func limitBody(n int64, routes map[string]int64) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			req := c.Request()
			n := n
			if m, ok := routes[req.Method+" "+c.Path()]; ok {
				n = m
			}
			if req.ContentLength > n {
				return &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: fmt.Sprintf("request body is larger than %d bytes", n)}
			}
			req.Body = http.MaxBytesReader(c.Response(), req.Body, n)
			return next(c)
		}
	}
}
