package server

import (
	"context"
	"crypto/sha256"
	"encoding"
	"errors"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/provenance"
)

// Resumable uploads speak tus 1.0.0 (https://tus.io/protocols/resumable-upload) with
// the creation, termination and expiration extensions: an open protocol with client
// libraries for most languages, where a client resumes from the offset the server
// says it holds. The single-request POST /api/v1/files stays for small files.
const (
	tusVersion    = "1.0.0"
	tusExtensions = "creation,termination,expiration"
	// tusOffsetStream is the media type tus requires of a PATCH body.
	tusOffsetStream = "application/offset+octet-stream"
	// uploadLease is how long a PATCH owns its upload without renewing; it is renewed
	// every third of that while the request runs, so only a dead process's lease
	// runs out, and a resuming client waits at most this long for it.
	uploadLease = 20 * time.Second
	// uploadSegmentBytes is the size of a PATCH's buffers: bytes gather into one
	// of this size before they are stored (as a part, or a segment of one), and
	// the next fills while it is stored, so a PATCH holds at most two in memory.
	uploadSegmentBytes = 8 << 20
)

// tusResumable marks every answer of the upload routes with the protocol version
// and refuses requests for another version (all but OPTIONS, which is how a client
// finds the version out). It runs before authorization, so even a 401 says tus.
func tusResumable(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		h := c.Response().Header()
		h.Set("Tus-Resumable", tusVersion)
		if c.Request().Method == http.MethodOptions || c.Request().Header.Get("Tus-Resumable") == tusVersion {
			return next(c)
		}
		h.Set("Tus-Version", tusVersion)
		return c.JSON(http.StatusPreconditionFailed, errorBody{errorDetail{Code: "invalid",
			Message:   "send Tus-Resumable: " + tusVersion + " (the only tus version this server speaks)",
			Fields:    map[string]string{"Tus-Resumable": "must be " + tusVersion},
			RequestID: requestID(c)}})
	}
}

// handleUploadOptions says which tus version and extensions the server offers.
func (s *Server) handleUploadOptions(c echo.Context) error {
	h := c.Response().Header()
	h.Set("Tus-Version", tusVersion)
	h.Set("Tus-Extension", tusExtensions)
	h.Set("Tus-Max-Size", strconv.FormatInt(s.cfg.MaxFileBytes, 10))
	return c.NoContent(http.StatusNoContent)
}

// handleUploadCreate begins an upload: a pending data file record (so the file has
// its id from the start), the upload's row and the store's multipart upload. With
// a declared digest the parts go straight to the content address, since a
// mismatch is found before completion and leaves nothing there; bytes the store
// already holds are only read and checked, not stored again.
func (s *Server) handleUploadCreate(c echo.Context) error {
	req := c.Request()
	ctx := req.Context()
	length, err := headerInt(req.Header, "Upload-Length")
	if err != nil {
		if req.Header.Get("Upload-Defer-Length") != "" {
			return beamledger.InvalidField("Upload-Defer-Length", "is not supported: give Upload-Length")
		}
		return err
	}
	if length > s.cfg.MaxFileBytes {
		return &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: "the file is larger than the " +
			strconv.FormatInt(s.cfg.MaxFileBytes, 10) + " bytes this server accepts"}
	}
	meta, err := provenance.ParseUploadMetadata(req.Header.Get("Upload-Metadata"))
	if err != nil {
		return err
	}
	projectID, err := s.uploadTarget(ctx, meta.Target)
	if err != nil {
		return err
	}
	id := uuid.NewString()
	n := provenance.NewUpload{LengthBytes: length, DeclaredSHA256: meta.SHA256, PartSizeBytes: s.partBytes(length),
		File: provenance.NewDataFile{ProjectID: projectID, AcquisitionID: meta.Target.AcquisitionID, MediaType: meta.Target.MediaType,
			FileName: meta.Target.FileName, Store: s.objects.Name(), UploadedBy: principal(ctx).ID()}}
	if n.HashState, err = sha256.New().(encoding.BinaryMarshaler).MarshalBinary(); err != nil {
		return err
	}
	n.ObjectKey = provenance.IncomingKey(id)
	stored := false
	if meta.SHA256 != "" {
		n.ObjectKey = provenance.ObjectKey(meta.SHA256)
		if stored, err = s.store.ObjectStored(ctx, meta.SHA256); err != nil {
			return err
		}
	}
	if !stored { // else MultipartID stays empty: the bytes are only checked
		if n.MultipartID, err = s.objects.CreateMultipart(ctx, n.ObjectKey); err != nil {
			return err
		}
	}
	u, err := s.store.CreateUpload(ctx, id, n, s.now())
	if err != nil {
		if n.MultipartID != "" {
			_ = s.objects.AbortMultipart(context.WithoutCancel(ctx), n.ObjectKey, n.MultipartID)
		}
		return err
	}
	h := c.Response().Header()
	h.Set(echo.HeaderLocation, "/api/v1/uploads/"+u.ID)
	h.Set("Upload-Expires", s.uploadExpires(u))
	h.Set("Data-File-Id", u.DataFileID)
	return c.NoContent(http.StatusCreated)
}

// visibleUpload loads an upload the caller may write: its creator's, or any for
// staff and managers. Others are told it does not exist.
func (s *Server) visibleUpload(ctx context.Context, id string) (provenance.Upload, error) {
	u, err := s.store.Upload(ctx, id)
	if err != nil {
		return u, err
	}
	if me := principal(ctx); u.CreatedBy != me.ID() && !me.FacilityWide() {
		return provenance.Upload{}, beamledger.NotFound("upload")
	}
	return u, nil
}

// handleUploadHead says how many bytes the server holds durably: the offset to
// resume from.
func (s *Server) handleUploadHead(c echo.Context) error {
	u, err := s.visibleUpload(c.Request().Context(), c.Param("upload_id"))
	if err != nil {
		return err
	}
	h := c.Response().Header()
	h.Set("Upload-Offset", strconv.FormatInt(u.OffsetBytes, 10))
	h.Set("Upload-Length", strconv.FormatInt(u.LengthBytes, 10))
	h.Set("Upload-Expires", s.uploadExpires(u))
	h.Set("Data-File-Id", u.DataFileID)
	h.Set(echo.HeaderCacheControl, "no-store")
	return c.NoContent(http.StatusOK)
}

// handleUploadPatch appends the body at Upload-Offset. One request writes an
// upload at a time (a lease in its row); a second is answered 409 as an offset
// mismatch would be, since the client's remedy is the same: HEAD, then resume.
// The bytes that arrived before the body ended, even by a dropped connection,
// are kept. The request that brings the last byte completes the file.
func (s *Server) handleUploadPatch(c echo.Context) error {
	req := c.Request()
	if mt, _, _ := strings.Cut(req.Header.Get(echo.HeaderContentType), ";"); strings.TrimSpace(mt) != tusOffsetStream {
		return echo.NewHTTPError(http.StatusUnsupportedMediaType, "a PATCH body must be Content-Type: "+tusOffsetStream)
	}
	offset, err := headerInt(req.Header, "Upload-Offset")
	if err != nil {
		return err
	}
	id := c.Param("upload_id")
	u, err := s.visibleUpload(req.Context(), id)
	if err != nil {
		return err
	}
	if err := checkOffset(u, offset, req.ContentLength); err != nil {
		return err
	}
	token := uuid.NewString()
	if u, err = s.store.LeaseUpload(req.Context(), id, token, uploadLease, s.now()); err != nil {
		return err
	}
	// Storing what did arrive must outlive a client that hung up: the store and
	// database work runs on a context the request's end does not cancel, ended
	// only if another request takes the lease.
	ctx, cancel := context.WithCancelCause(context.WithoutCancel(req.Context()))
	defer cancel(nil)
	defer func() { _ = s.store.ReleaseUpload(context.WithoutCancel(ctx), id, token) }()
	if err := checkOffset(u, offset, req.ContentLength); err != nil {
		return err
	}
	if u, err = s.declareUploadDigest(ctx, req.Header, u, token); err != nil {
		return err
	}
	stopRenewing := s.renewLease(ctx, cancel, id, token)
	w, err := s.newUploadWriter(ctx, u, token, req.ContentLength)
	if err != nil {
		stopRenewing()
		return err
	}
	bodyErr := w.receive(ctx, &idleReader{r: req.Body, rc: http.NewResponseController(c.Response()), idle: s.cfg.ReadTimeout})
	stopRenewing()
	if err := context.Cause(ctx); err != nil {
		return err
	}
	if w.err != nil {
		return w.err // storing failed: the offset stays where it was durable
	}
	if bodyErr != nil {
		return patchBodyError(bodyErr, w.u.OffsetBytes)
	}
	h := c.Response().Header()
	h.Set("Upload-Offset", strconv.FormatInt(w.u.OffsetBytes, 10))
	if w.u.OffsetBytes < w.u.LengthBytes {
		h.Set("Upload-Expires", s.uploadExpires(w.u))
		return c.NoContent(http.StatusNoContent)
	}
	declaredIn := "Upload-Metadata"
	if req.Header.Get("Repr-Digest") != "" {
		declaredIn = "Repr-Digest"
	}
	f, err := s.completeUpload(ctx, w, declaredIn)
	if err != nil {
		return err
	}
	h.Set("Data-File-Id", f.ID)
	h.Set("Repr-Digest", provenance.ReprDigest(f.SHA256))
	return c.NoContent(http.StatusNoContent)
}

// declareUploadDigest takes a Repr-Digest (RFC 9530) on a PATCH as the SHA-256 of
// the whole file: the digest a client that hashes while it sends learns only near
// the end, declared on a later PATCH than the creation (the last, typically). It
// holds from then on as a sha256 declared at creation does; one that disagrees
// with the digest declared before is refused before any byte is read.
func (s *Server) declareUploadDigest(ctx context.Context, h http.Header, u provenance.Upload, token string) (provenance.Upload, error) {
	field := h.Get("Repr-Digest")
	if field == "" {
		return u, nil
	}
	d, ok, err := provenance.ParseReprDigest(field)
	switch {
	case err != nil:
		return u, beamledger.InvalidField("Repr-Digest", err.Error())
	case !ok:
		return u, beamledger.InvalidField("Repr-Digest", "has no sha-256 member; sha-256 is the digest this server checks")
	case u.DeclaredSHA256 == d:
		return u, nil
	case u.DeclaredSHA256 != "":
		return u, beamledger.InvalidField("Repr-Digest", "differs from the sha-256 declared before for this upload")
	}
	if err := s.store.DeclareUploadDigest(ctx, u.ID, token, d); err != nil {
		return u, err
	}
	u.DeclaredSHA256 = d
	return u, nil
}

// patchBodyError words how a PATCH body failed. What arrived before is kept, so
// the message says where to resume.
func patchBodyError(err error, offset int64) error {
	var maxErr *http.MaxBytesError
	var de *beamledger.Error
	switch {
	case errors.As(err, &de):
		return err
	case errors.As(err, &maxErr):
		return &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: "the body is larger than this server accepts"}
	}
	return beamledger.Invalid("the body ended early; the bytes up to offset "+strconv.FormatInt(offset, 10)+" are kept: resume from there", nil)
}

// checkOffset refuses a PATCH that does not continue where the upload stands, or
// whose announced body runs past its length.
func checkOffset(u provenance.Upload, offset, contentLength int64) error {
	if offset != u.OffsetBytes {
		return beamledger.Conflict("Upload-Offset %d is not the upload's offset %d; HEAD it and resume from there", offset, u.OffsetBytes)
	}
	if contentLength > 0 && offset+contentLength > u.LengthBytes {
		return &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: "the body runs past Upload-Length " + strconv.FormatInt(u.LengthBytes, 10)}
	}
	return nil
}

// handleUploadDelete terminates an upload: its parts are discarded and its pending
// record removed. An upload a request is writing is answered 409.
func (s *Server) handleUploadDelete(c echo.Context) error {
	ctx := c.Request().Context()
	id := c.Param("upload_id")
	if _, err := s.visibleUpload(ctx, id); err != nil {
		return err
	}
	u, err := s.store.LeaseUpload(ctx, id, uuid.NewString(), uploadLease, s.now())
	if err != nil {
		return err
	}
	if err := s.store.DeleteUpload(ctx, id); err != nil {
		return err
	}
	s.discardUploadObjects(context.WithoutCancel(ctx), u)
	return c.NoContent(http.StatusNoContent)
}

// renewLease keeps the PATCH's lease while it runs, and cancels ctx when another
// request has taken it (the lease ran out while this one was stuck). The function
// returned stops the renewing.
func (s *Server) renewLease(ctx context.Context, cancel context.CancelCauseFunc, id, token string) (stop func()) {
	done := make(chan struct{})
	go func() {
		t := time.NewTicker(uploadLease / 3)
		defer t.Stop()
		for {
			select {
			case <-done:
				return
			case <-ctx.Done():
				return
			case <-t.C:
				err := s.store.RenewUpload(ctx, id, token, uploadLease, s.now())
				if errors.Is(err, beamledger.ErrConflict) {
					cancel(err)
					return
				}
			}
		}
	}()
	return func() { close(done) }
}

// uploadExpires is when the cleanup may remove the upload if nothing more comes,
// as tus's expiration extension words it (an HTTP date).
func (s *Server) uploadExpires(u provenance.Upload) string {
	return u.LastActivity.Add(s.cfg.UploadExpiry).UTC().Format(http.TimeFormat)
}

// uploadGeometry sizes resumable uploads; zero fields take the defaults.
type uploadGeometry struct {
	segment  int64 // the buffer and segment size (uploadSegmentBytes)
	maxParts int64 // the most parts of one upload (provenance.MaxUploadParts)
}

// segmentBytes is the buffer and segment size: the store's least part size when
// that is larger.
func (s *Server) segmentBytes() int64 {
	seg := s.uploads.segment
	if seg == 0 {
		seg = uploadSegmentBytes
	}
	return max(seg, s.objects.MinPartSize())
}

// partBytes is the part size of a new upload of length bytes.
func (s *Server) partBytes(length int64) int64 {
	n := s.uploads.maxParts
	if n == 0 {
		n = provenance.MaxUploadParts
	}
	return provenance.UploadPartSize(length, s.segmentBytes(), n)
}

// headerInt reads a non-negative whole-number header, which tus requires of
// Upload-Length and Upload-Offset.
func headerInt(h http.Header, name string) (int64, error) {
	v := h.Get(name)
	n, err := strconv.ParseInt(v, 10, 64)
	if err != nil || n < 0 || strings.TrimSpace(v) != v {
		return 0, beamledger.InvalidField(name, "is required: a whole number of bytes, 0 or more")
	}
	return n, nil
}

// idleReader lets a long PATCH run past the server's read timeout while bytes keep
// coming: each read moves the deadline on (at most every second), so only a body
// that stalls for the whole timeout is cut off.
type idleReader struct {
	r     interface{ Read([]byte) (int, error) }
	rc    *http.ResponseController
	idle  time.Duration
	moved time.Time
}

func (r *idleReader) Read(p []byte) (int, error) {
	if now := time.Now(); now.Sub(r.moved) > time.Second {
		_ = r.rc.SetReadDeadline(now.Add(r.idle))
		_ = r.rc.SetWriteDeadline(time.Time{})
		r.moved = now
	}
	return r.r.Read(p)
}
