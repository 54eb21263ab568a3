package server

import (
	"net/http"
	"strconv"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
)

// ledgerKeyAnswer publishes the key that signs checkpoints.
type ledgerKeyAnswer struct {
	Origin      string `json:"origin"`
	VerifierKey string `json:"verifier_key"`
}

// ledgerHeadAnswer is the ledger's state: the sealed tree and what waits to be sealed.
type ledgerHeadAnswer struct {
	Size           int64   `json:"size"`
	Root           string  `json:"root"`
	SealedAt       *string `json:"sealed_at"`
	Unsealed       int64   `json:"unsealed"`
	OldestUnsealed *string `json:"oldest_unsealed"`
}

// handleLedgerKey answers the checkpoints' verifier key, for anyone to check them.
func (s *Server) handleLedgerKey(c echo.Context) error {
	key := s.ledgerVerifierKey()
	if key == "" {
		return beamledger.Unavailable("this server has no ledger key")
	}
	return c.JSON(http.StatusOK, ledgerKeyAnswer{Origin: s.cfg.LedgerOrigin, VerifierKey: key})
}

// handleLedgerCheckpoint answers the latest signed checkpoint: as the signed note
// itself for text/plain clients, as JSON otherwise. It is public: a checkpoint says
// how large the ledger is and commits to its content, and reveals nothing else.
func (s *Server) handleLedgerCheckpoint(c echo.Context) error {
	cp, err := s.store.LatestCheckpoint(c.Request().Context())
	if err != nil {
		return err
	}
	c.Response().Header().Set("Cache-Control", "no-cache")
	if c.QueryParam("format") == "note" {
		return c.String(http.StatusOK, cp.Note)
	}
	return c.JSON(http.StatusOK, cp)
}

// handleLedgerCheckpoints lists checkpoints after a tree size, oldest first.
func (s *Server) handleLedgerCheckpoints(c echo.Context) error {
	after, err := queryInt(c, "after", 0, 0, 1<<62)
	if err != nil {
		return err
	}
	limit, err := queryInt(c, "limit", 100, 1, 1000)
	if err != nil {
		return err
	}
	cps, err := s.store.Checkpoints(c.Request().Context(), after, int(limit))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(cps))
}

// handleLedgerCheckpointSign seals what is committed and signs a checkpoint now.
func (s *Server) handleLedgerCheckpointSign(c echo.Context) error {
	cp, err := s.signCheckpoint(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, cp)
}

// handleLedgerHead answers the sealed tree's size and root and the sealing lag.
func (s *Server) handleLedgerHead(c echo.Context) error {
	ctx := c.Request().Context()
	h, err := s.store.LedgerHead(ctx)
	if err != nil {
		return err
	}
	n, oldest, err := s.store.UnsealedEvents(ctx)
	if err != nil {
		return err
	}
	a := ledgerHeadAnswer{Size: h.Size, Root: h.Root.String(), Unsealed: n}
	if !h.SealedAt.IsZero() {
		t := h.SealedAt.UTC().Format(time.RFC3339Nano)
		a.SealedAt = &t
	}
	if oldest != nil {
		t := oldest.UTC().Format(time.RFC3339Nano)
		a.OldestUnsealed = &t
	}
	return c.JSON(http.StatusOK, a)
}

// handleLedgerEvent answers one sealed event with its leaf (the canonical bytes the
// tree commits to). Events hold the state of records of every project, so they are
// for those who read everything.
func (s *Server) handleLedgerEvent(c echo.Context) error {
	index, err := strconv.ParseInt(c.Param("index"), 10, 64)
	if err != nil || index < 0 {
		return beamledger.NotFound("ledger event")
	}
	e, err := s.store.LedgerEvent(c.Request().Context(), index)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, e)
}

// handleLedgerEntityEvents lists the events of one record, sealed ones in ledger
// order, then those waiting to be sealed.
func (s *Server) handleLedgerEntityEvents(c echo.Context) error {
	es, err := s.store.EventsFor(c.Request().Context(), c.Param("entity_type"), c.Param("entity_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(es))
}

// handleInclusionProof proves that event index is in the tree of size events.
func (s *Server) handleInclusionProof(c echo.Context) error {
	index, err := queryInt(c, "index", -1, 0, 1<<62)
	if err != nil {
		return err
	}
	size, err := queryInt(c, "size", -1, 1, 1<<62)
	if err != nil {
		return err
	}
	p, err := s.store.InclusionProof(c.Request().Context(), index, size)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, p)
}

// handleConsistencyProof proves that the tree of size from is a prefix of that of size to.
func (s *Server) handleConsistencyProof(c echo.Context) error {
	from, err := queryInt(c, "from", -1, 1, 1<<62)
	if err != nil {
		return err
	}
	to, err := queryInt(c, "to", -1, 1, 1<<62)
	if err != nil {
		return err
	}
	p, err := s.store.ConsistencyProof(c.Request().Context(), from, to)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, p)
}

// queryInt reads an integer query parameter between lo and hi; def < 0 makes it required.
func queryInt(c echo.Context, name string, def, lo, hi int64) (int64, error) {
	v := c.QueryParam(name)
	if v == "" {
		if def < 0 {
			return 0, beamledger.InvalidField(name, "is required")
		}
		return def, nil
	}
	n, err := strconv.ParseInt(v, 10, 64)
	if err != nil || n < lo || n > hi {
		return 0, beamledger.InvalidField(name, "must be a whole number from "+strconv.FormatInt(lo, 10))
	}
	return n, nil
}
