package server

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/provenance"
	"beamledger/storage/objects"
)

// uploadTarget checks that the caller may add files to the target and returns the
// project the file will belong to. Acquisitions take files from the booked user,
// staff, managers and the instrument's agent (file:write); processed files go to a
// project from its members, staff and managers.
func (s *Server) uploadTarget(ctx context.Context, t provenance.FileTarget) (projectID string, err error) {
	me := principal(ctx)
	if t.AcquisitionID != "" {
		a, err := s.store.Acquisition(ctx, t.AcquisitionID)
		if err != nil {
			return "", err
		}
		switch {
		case me.IsAgent():
			if a.InstrumentID != me.InstrumentID {
				return "", beamledger.NotFound("acquisition")
			}
		case me.FacilityWide() || a.UserID == me.UserID:
		default:
			if _, err := s.visibleProject(ctx, a.ProjectID); err != nil {
				return "", beamledger.NotFound("acquisition")
			}
			return "", beamledger.Forbidden("only the booked user, staff or the instrument's agent add data files to this acquisition")
		}
		return a.ProjectID, nil
	}
	if me.IsAgent() {
		return "", beamledger.Forbidden("instrument agents add files to acquisitions; give acquisition_id")
	}
	p, err := s.visibleProject(ctx, t.ProjectID)
	if err != nil {
		return "", err
	}
	return p.ID, nil
}

// handleFileUpload stores one data file from the request body, streaming: the SHA-256
// is computed as the bytes pass to the object store, nothing is buffered whole, and
// the record is written only once the digest and size are known and, when the client
// declared a digest (RFC 9530 Repr-Digest or Content-Digest, sha-256), match it. A
// mismatch leaves no record and no object.
func (s *Server) handleFileUpload(c echo.Context) error {
	req := c.Request()
	ctx := req.Context()
	t := provenance.FileTarget{AcquisitionID: c.QueryParam("acquisition_id"), ProjectID: c.QueryParam("project_id"),
		FileName: c.QueryParam("name"), MediaType: req.Header.Get(echo.HeaderContentType)}
	if err := t.Normalize(); err != nil {
		return err
	}
	declared, err := declaredDigest(req.Header)
	if err != nil {
		return err
	}
	projectID, err := s.uploadTarget(ctx, t)
	if err != nil {
		return err
	}
	keepReading(c.Response(), s.cfg.ReadTimeout)
	body := &digestReader{r: req.Body, h: sha256.New(), want: declared, size: req.ContentLength}
	if err := s.storeObject(ctx, body, req.ContentLength, t.MediaType, declared); err != nil {
		return err
	}
	f, created, err := s.store.RecordFile(ctx, provenance.NewDataFile{ProjectID: projectID, AcquisitionID: t.AcquisitionID,
		SHA256: body.sum(), SizeBytes: body.n, MediaType: t.MediaType, FileName: t.FileName, Store: s.objects.Name(),
		UploadedBy: principal(ctx).ID()}, s.now())
	if err != nil {
		return err
	}
	c.Response().Header().Set("Repr-Digest", provenance.ReprDigest(f.SHA256))
	if created {
		return c.JSON(http.StatusCreated, f)
	}
	return c.JSON(http.StatusOK, f)
}

// storeObject writes the body under its content address. With a declared digest the
// bytes go straight to their final key, since a Put whose reader fails (as the
// digest reader does on a mismatch) leaves no object; bytes already stored are only
// read and checked. Without one they land under a temporary key and are promoted
// once their digest is known.
func (s *Server) storeObject(ctx context.Context, body *digestReader, size int64, mediaType, declared string) error {
	if size < 0 {
		size = -1
	}
	opts := objects.PutOptions{ContentType: mediaType}
	if d := s.cfg.ObjectRetention; d > 0 {
		opts.RetainUntil = s.now().Add(d)
	}
	if declared != "" {
		have, err := s.store.ObjectStored(ctx, declared)
		if err != nil {
			return err
		}
		if have {
			_, err := io.Copy(io.Discard, body)
			return uploadError(err)
		}
		if size >= 0 && size <= smallUpload {
			// A body small enough to go up as one request is read and checked first:
			// a request cut short by the check would reach the store half-sent, which
			// some S3 servers take badly. Larger bodies go up in parts, each read
			// whole before it is sent, and the check stops them before the last.
			buf, err := io.ReadAll(body)
			if err != nil {
				return uploadError(err)
			}
			_, err = s.objects.Put(ctx, provenance.ObjectKey(declared), bytes.NewReader(buf), int64(len(buf)), opts)
			return uploadError(err)
		}
		_, err = s.objects.Put(ctx, provenance.ObjectKey(declared), body, size, opts)
		return uploadError(err)
	}
	tmp := "incoming/" + uuid.NewString()
	if _, err := s.objects.Put(ctx, tmp, body, size, opts); err != nil {
		return uploadError(err)
	}
	if err := s.objects.Promote(ctx, tmp, provenance.ObjectKey(body.sum())); err != nil {
		_ = s.objects.Delete(context.WithoutCancel(ctx), tmp)
		return uploadError(err)
	}
	return nil
}

// smallUpload is the largest body checked in memory before it is stored: the S3
// store's part size, below which it sends an object as one request. Memory stays
// bounded by it whatever the file size.
const smallUpload = objects.DefaultPartSize

// errDigestMismatch is what digestReader returns in place of io.EOF when the bytes
// are not the ones the client declared.
var errDigestMismatch = errors.New("the uploaded bytes do not match the declared digest")

// digestReader hashes and counts what passes through it. With want set, the end of
// the stream is an error unless the digest matches, so the store never completes an
// object of other bytes. With size known, the end is the size-th byte, reported with
// it: a store that reads exactly size bytes never asks for the EOF after them, and
// must still meet the check before it completes the object. On a mismatch the last
// byte is never handed over, so no request carrying the bytes can be complete.
type digestReader struct {
	r    io.Reader
	h    hash.Hash
	n    int64
	size int64 // -1 when unknown
	want string
	done string
}

func (d *digestReader) Read(p []byte) (int, error) {
	if d.done != "" {
		return 0, io.EOF
	}
	if d.size >= 0 && int64(len(p)) > d.size-d.n {
		p = p[:d.size-d.n]
	}
	n, err := d.r.Read(p)
	d.h.Write(p[:n])
	d.n += int64(n)
	if err == nil && d.size >= 0 && d.n == d.size {
		err = io.EOF
	}
	if err == io.EOF {
		d.done = hex.EncodeToString(d.h.Sum(nil))
		if d.want != "" && d.done != d.want {
			// Withhold the last byte: a store sending the body in one request with
			// its length announced would otherwise have sent all of it by the time
			// it sees the error, and the S3 server would keep the object.
			return max(n-1, 0), errDigestMismatch
		}
	}
	return n, err
}

func (d *digestReader) sum() string { return d.done }

// uploadError words what went wrong with the bytes of an upload.
func uploadError(err error) error {
	var maxErr *http.MaxBytesError
	switch {
	case err == nil:
		return nil
	case errors.Is(err, errDigestMismatch):
		return beamledger.InvalidField("Repr-Digest", "the uploaded bytes do not match the declared sha-256; nothing was stored")
	case errors.As(err, &maxErr):
		return &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: fmt.Sprintf("the file is larger than the %d bytes this server accepts", maxErr.Limit)}
	case errors.Is(err, io.ErrUnexpectedEOF):
		return beamledger.Invalid("the upload ended before all its bytes arrived; nothing was stored", nil)
	}
	return err
}

// declaredDigest reads a client's sha-256 from Repr-Digest or Content-Digest (for a
// whole-body upload without content coding the two are the same), as hex, or "".
func declaredDigest(h http.Header) (string, error) {
	for _, name := range []string{"Repr-Digest", "Content-Digest"} {
		v := h.Get(name)
		if v == "" {
			continue
		}
		d, ok, err := provenance.ParseReprDigest(v)
		if err != nil {
			return "", beamledger.InvalidField(name, err.Error())
		}
		if ok {
			return d, nil
		}
	}
	return "", nil
}

// keepReading lets a long upload run past the server's read timeout as long as bytes
// keep coming: the deadline is moved on by each read instead of bounding the whole
// body. Large data files take minutes to hours.
func keepReading(w http.ResponseWriter, idle time.Duration) {
	rc := http.NewResponseController(w)
	_ = rc.SetReadDeadline(time.Now().Add(idle))
	_ = rc.SetWriteDeadline(time.Time{})
}

// visibleFile loads a file record the caller may read: those who read everything and
// the members of its project.
func (s *Server) visibleFile(ctx context.Context, id string) (provenance.DataFile, error) {
	f, err := s.store.DataFile(ctx, id)
	if err != nil {
		return f, err
	}
	if _, err := s.visibleProject(ctx, f.ProjectID); err != nil {
		return provenance.DataFile{}, beamledger.NotFound("data file")
	}
	return f, nil
}

func (s *Server) handleFileGet(c echo.Context) error {
	f, err := s.visibleFile(c.Request().Context(), c.Param("file_id"))
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, f)
}

// handleFileList lists file records: researchers see their projects' only.
func (s *Server) handleFileList(c echo.Context) error {
	ctx := c.Request().Context()
	f := provenance.FileFilter{AcquisitionID: c.QueryParam("acquisition_id"), ProjectID: c.QueryParam("project_id"), SHA256: strings.ToLower(c.QueryParam("sha256"))}
	limit, err := queryInt(c, "limit", 1000, 1, 1000)
	if err != nil {
		return err
	}
	f.Limit = int(limit)
	if f.ProjectIDs, err = s.readableProjectIDs(ctx); err != nil {
		return err
	}
	fs, err := s.store.DataFiles(ctx, f)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(fs))
}

// handleFileContent serves a file's bytes with its digest as the ETag, Repr-Digest on
// whole responses, and single byte ranges (RFC 9110 §14).
func (s *Server) handleFileContent(c echo.Context) error {
	ctx := c.Request().Context()
	f, err := s.visibleFile(ctx, c.Param("file_id"))
	if err != nil {
		return err
	}
	if f.Status != provenance.FileStored {
		return beamledger.Conflict("the file's upload has not finished")
	}
	h := c.Response().Header()
	etag := `"` + f.SHA256 + `"`
	h.Set("ETag", etag)
	h.Set("Accept-Ranges", "bytes")
	h.Set("Cache-Control", "private, max-age=31536000, immutable")
	h.Set(echo.HeaderContentDisposition, fmt.Sprintf("attachment; filename=%q", f.FileName))
	if inm := c.Request().Header.Get("If-None-Match"); inm != "" && (inm == etag || inm == "*") {
		return c.NoContent(http.StatusNotModified)
	}
	offset, length, partial, err := byteRange(c.Request(), f.SizeBytes, etag)
	if err != nil {
		h.Set("Content-Range", fmt.Sprintf("bytes */%d", f.SizeBytes))
		return err
	}
	r, err := s.objects.Open(ctx, f.ObjectKey, offset, length)
	if err != nil {
		return err
	}
	defer r.Close()
	h.Set(echo.HeaderContentLength, strconv.FormatInt(length, 10))
	h.Set(echo.HeaderContentType, f.MediaType)
	status := http.StatusOK
	if partial {
		status = http.StatusPartialContent
		h.Set("Content-Range", fmt.Sprintf("bytes %d-%d/%d", offset, offset+length-1, f.SizeBytes))
	} else {
		h.Set("Repr-Digest", provenance.ReprDigest(f.SHA256))
	}
	_ = http.NewResponseController(c.Response()).SetWriteDeadline(time.Time{})
	c.Response().WriteHeader(status)
	if c.Request().Method == http.MethodHead {
		return nil
	}
	_, err = io.Copy(c.Response(), r)
	return err
}

// errRange is a Range header this server cannot satisfy.
var errRange = &beamledger.Error{Kind: beamledger.ErrRangeNotSatisfiable, Message: "the requested range is outside the file"}

// byteRange reads a single-range Range header ("bytes=a-b", "bytes=a-", "bytes=-n")
// against a file of size bytes. Several ranges, an If-Range that does not match, or
// no header at all mean the whole file.
func byteRange(r *http.Request, size int64, etag string) (offset, length int64, partial bool, err error) {
	spec := r.Header.Get("Range")
	if spec == "" || (r.Header.Get("If-Range") != "" && r.Header.Get("If-Range") != etag) {
		return 0, size, false, nil
	}
	units, set, ok := strings.Cut(spec, "=")
	if !ok || strings.TrimSpace(units) != "bytes" || strings.Contains(set, ",") {
		return 0, size, false, nil
	}
	first, last, ok := strings.Cut(strings.TrimSpace(set), "-")
	if !ok {
		return 0, size, false, nil
	}
	if first == "" { // the last n bytes
		n, err := strconv.ParseInt(last, 10, 64)
		if err != nil || n <= 0 {
			return 0, 0, false, errRange
		}
		n = min(n, size)
		return size - n, n, true, nil
	}
	a, err := strconv.ParseInt(first, 10, 64)
	if err != nil || a < 0 || a >= size {
		return 0, 0, false, errRange
	}
	b := size - 1
	if last != "" {
		if b, err = strconv.ParseInt(last, 10, 64); err != nil || b < a {
			return 0, 0, false, errRange
		}
		b = min(b, size-1)
	}
	return a, b - a + 1, true, nil
}

// handleDerivationCreate records a processing step between files the caller may read;
// the output must be in a project the caller belongs to (or any, for staff).
func (s *Server) handleDerivationCreate(c echo.Context) error {
	var n provenance.NewDerivation
	if err := bind(c, &n); err != nil {
		return err
	}
	if err := n.Normalize(); err != nil {
		return err
	}
	ctx := c.Request().Context()
	me := principal(ctx)
	// Files the caller may not read are answered as missing, naming nothing of them.
	for _, id := range append([]string{n.OutputFileID}, n.InputFileIDs...) {
		if _, err := s.visibleFile(ctx, id); err != nil {
			return err
		}
	}
	if n.OperatorID == "" {
		n.OperatorID = me.UserID
	}
	n.RecordedBy = me.ID()
	d, err := s.store.RecordDerivation(ctx, n, s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, d)
}

// handleLineage returns the graph of derivations connected to a file, with every
// file in it the caller may read (others appear only as ids in the derivations).
func (s *Server) handleLineage(c echo.Context) error {
	ctx := c.Request().Context()
	f, err := s.visibleFile(ctx, c.Param("file_id"))
	if err != nil {
		return err
	}
	l, err := s.store.Lineage(ctx, f.ID)
	if err != nil {
		return err
	}
	me := principal(ctx)
	if !me.CanReadEverything() {
		mine, err := s.myProjects(ctx, me)
		if err != nil {
			return err
		}
		files := l.Files[:0]
		for _, x := range l.Files {
			if mine[x.ProjectID] {
				files = append(files, x)
			}
		}
		l.Files = files
	}
	return c.JSON(http.StatusOK, l)
}
