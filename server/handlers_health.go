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
	// Replica is the read replica's state, absent without one: "ok", "unreachable"
	// or "not a standby". It never makes the server unready: the reports it serves
	// answer 503 while it is away, and everything else does not need it.
	Replica string `json:"replica,omitempty"`
	// ReplicaLagSeconds is how far the replica's replay trails (when it answers).
	ReplicaLagSeconds *float64 `json:"replica_lag_seconds,omitempty"`
}

// replicaCheckTimeout bounds the replica's part of a readiness check, so that a
// replica that does not answer leaves time for the answer itself.
const replicaCheckTimeout = time.Second

// handleReady answers 200 only when the database answers and its schema is the one
// this binary knows, so a load balancer sends no traffic to a mismatched process.
func (s *Server) handleReady(c echo.Context) error {
	ctx, cancel := context.WithTimeout(c.Request().Context(), 3*time.Second)
	defer cancel()
	r := readiness{Status: "unavailable", Database: "unreachable"}
	s.replicaReadiness(ctx, &r)
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

// replicaReadiness fills in the read replica's state, when there is one.
func (s *Server) replicaReadiness(ctx context.Context, r *readiness) {
	if s.replica == nil {
		return
	}
	ctx, cancel := context.WithTimeout(ctx, replicaCheckTimeout)
	defer cancel()
	st, err := s.replica.ReplicaStatus(ctx)
	switch {
	case err != nil:
		r.Replica = "unreachable"
		return
	case !st.Standby:
		r.Replica = "not a standby"
	default:
		r.Replica = "ok"
	}
	lag := st.ReplayLag.Seconds()
	r.ReplicaLagSeconds = &lag
}
