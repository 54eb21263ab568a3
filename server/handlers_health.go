package server

import (
	"context"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"
)

// handleHealth answers while the process runs.
func (s *Server) handleHealth(c echo.Context) error {
	return c.JSON(http.StatusOK, map[string]string{"status": "ok"})
}

type readiness struct {
	Status        string `json:"status"`
	Database      string `json:"database"`
	SchemaVersion int64  `json:"schema_version"`
	SchemaKnown   int64  `json:"schema_known"`
}

// handleReady answers 200 only when the database answers and its schema is the one
// this binary knows, so a load balancer sends no traffic to a mismatched process.
func (s *Server) handleReady(c echo.Context) error {
	ctx, cancel := context.WithTimeout(c.Request().Context(), 3*time.Second)
	defer cancel()
	r := readiness{Status: "unavailable", Database: "unreachable"}
	st, err := s.store.Schema(ctx)
	if err != nil {
		return c.JSON(http.StatusServiceUnavailable, r)
	}
	r.Database, r.SchemaVersion, r.SchemaKnown = "ok", st.Current, st.Known
	if !st.UpToDate() {
		r.Database = "schema mismatch"
		return c.JSON(http.StatusServiceUnavailable, r)
	}
	r.Status = "ready"
	return c.JSON(http.StatusOK, r)
}
