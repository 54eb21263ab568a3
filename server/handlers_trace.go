package server

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/provenance"
	"beamledger/provenance/bundle"
)

// bundleInlineBytes is the largest data file a bundle holds unless asked not to;
// larger files are named by URL unless include_file=true asks for their bytes.
const bundleInlineBytes = 16 << 20

// errNoTrace answers a digest no readable record has: the same words whether the
// bytes are unknown or belong to a project the caller cannot read.
var errNoTrace = &beamledger.Error{Kind: beamledger.ErrNotFound, Message: "no data file you may read has this SHA-256"}

// traceDigest reads the {sha256} path parameter: 64 hexadecimal digits.
func traceDigest(c echo.Context) (string, error) {
	d := strings.ToLower(c.Param("sha256"))
	if !provenance.ValidSHA256(d) {
		return "", beamledger.InvalidField("sha256", "must be a SHA-256 digest: 64 hexadecimal digits")
	}
	return d, nil
}

// traceFor gathers the trace of the stored record of digest that the caller may
// read: the one named by file_id, or else the first an acquisition recorded (the
// record that says how the bytes were made), or the oldest. Auditors, staff
// and managers read every record; researchers those of their projects, and within
// the trace only the files of their projects (others stay as ids in derivations).
func (s *Server) traceFor(ctx context.Context, digest, fileID string) (provenance.Trace, error) {
	readable, err := s.readableProjectIDs(ctx)
	if err != nil {
		return provenance.Trace{}, err
	}
	fs, err := s.store.FilesByDigest(ctx, digest, readable)
	if err != nil {
		return provenance.Trace{}, err
	}
	if len(fs) == 0 {
		return provenance.Trace{}, errNoTrace
	}
	chosen := fs[0] // an acquisition's record if any, else the oldest
	if fileID != "" {
		found := false
		for _, f := range fs {
			if f.ID == fileID {
				chosen, found = f, true
			}
		}
		if !found {
			return provenance.Trace{}, beamledger.InvalidField("file_id", "names no record of these bytes that you may read")
		}
	}
	t, err := s.store.Trace(ctx, chosen.ID)
	if err != nil {
		return t, err
	}
	for _, f := range fs {
		if f.ID != chosen.ID {
			t.OtherRecords = append(t.OtherRecords, f.ID)
		}
	}
	t.Ledger.VerifierKey = s.ledgerVerifierKey()
	if t.Ledger.KeyName == "" {
		t.Ledger.KeyName = s.cfg.LedgerOrigin
	}
	if readable != nil {
		hideForeignFiles(&t, readable)
	}
	return t, nil
}

// hideForeignFiles drops the records, and the ledger events, of files in projects
// the caller does not belong to.
func hideForeignFiles(t *provenance.Trace, readable []string) {
	mine := map[string]bool{}
	for _, id := range readable {
		mine[id] = true
	}
	hidden := map[string]bool{}
	files := t.Files[:0]
	for _, f := range t.Files {
		if mine[f.ProjectID] {
			files = append(files, f)
		} else {
			hidden[f.ID] = true
		}
	}
	t.Files = files
	records := t.Ledger.Records[:0]
	for _, r := range t.Ledger.Records {
		if !(r.EntityType == provenance.EntityDataFile && hidden[r.EntityID]) {
			records = append(records, r)
		}
	}
	t.Ledger.Records = records
}

// handleTrace answers the trace of the data file with the digest in the path.
func (s *Server) handleTrace(c echo.Context) error {
	d, err := traceDigest(c)
	if err != nil {
		return err
	}
	t, err := s.traceFor(c.Request().Context(), d, c.QueryParam("file_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, t)
}

// handleTraceBytes hashes the request body as it arrives (nothing is kept) and
// answers the trace of the data file with those bytes.
func (s *Server) handleTraceBytes(c echo.Context) error {
	keepReading(c.Response(), s.cfg.ReadTimeout)
	h := sha256.New()
	if _, err := io.Copy(h, c.Request().Body); err != nil {
		return uploadError(err)
	}
	t, err := s.traceFor(c.Request().Context(), hex.EncodeToString(h.Sum(nil)), c.QueryParam("file_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, t)
}

// provNamespace is the IRI of the product's PROV prefix on this facility's ledger,
// so that names from two facilities never collide.
func (s *Server) provNamespace() string { return "https://" + s.cfg.LedgerOrigin + "/prov#" }

// handleTraceProv answers the trace as a W3C PROV-JSON document.
func (s *Server) handleTraceProv(c echo.Context) error {
	d, err := traceDigest(c)
	if err != nil {
		return err
	}
	t, err := s.traceFor(c.Request().Context(), d, c.QueryParam("file_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, provenance.NewProvDocument(t, s.provNamespace()))
}

// handleTraceBundle streams the provenance bundle: a zip written straight to the
// response, the data file's bytes copied from the store as they are read, so memory
// does not grow with the file.
func (s *Server) handleTraceBundle(c echo.Context) error {
	d, err := traceDigest(c)
	if err != nil {
		return err
	}
	include, given := true, c.QueryParam("include_file")
	if given != "" {
		if include, err = strconv.ParseBool(given); err != nil {
			return beamledger.InvalidField("include_file", "must be true or false")
		}
	}
	ctx := c.Request().Context()
	t, err := s.traceFor(ctx, d, c.QueryParam("file_id"))
	if err != nil {
		return err
	}
	if given == "" {
		include = t.File.SizeBytes <= bundleInlineBytes
	}
	// Refusals come before the first byte: once the archive starts, an error can
	// only cut the response short, which the client sees as a broken archive.
	if !bundle.FileSealed(t) {
		return beamledger.Conflict("the data file's ledger event is not yet covered by a signed checkpoint; try again in a few seconds")
	}
	contents := bundle.Contents{Trace: t, Namespace: s.provNamespace(), Published: s.now(),
		FileURL: c.Scheme() + "://" + c.Request().Host + "/api/v1/files/" + t.File.ID + "/content"}
	if include {
		r, err := s.objects.Open(ctx, t.File.ObjectKey, 0, t.File.SizeBytes)
		if err != nil {
			return err
		}
		defer r.Close()
		contents.Data = r
	}
	h := c.Response().Header()
	h.Set(echo.HeaderContentType, "application/zip")
	h.Set(echo.HeaderContentDisposition, fmt.Sprintf("attachment; filename=%q", "trace-"+t.File.SHA256[:16]+".zip"))
	_ = http.NewResponseController(c.Response()).SetWriteDeadline(time.Time{})
	c.Response().WriteHeader(http.StatusOK)
	if err := bundle.Write(c.Response(), contents); err != nil {
		// The status is sent: the archive ends without its central directory, which
		// every zip reader refuses, and the log says why.
		s.log.Warn("provenance bundle cut short", "file_id", t.File.ID, "error", err)
		return err
	}
	return nil
}
