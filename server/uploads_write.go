package server

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"log/slog"
	"slices"

	"beamledger"
	"beamledger/provenance"
	"beamledger/storage/objects"
)

// uploadWriter stores one PATCH's bytes. They gather in a buffer of at most one
// segment; a full buffer becomes a part (PutPart) when it reaches the end of the
// part being filled, else a segment object, and a part larger than a segment is
// assembled from the segment objects by streaming them back. Whatever is in the
// buffer when the body ends, however it ends, is stored as a segment, so a dropped
// connection loses nothing that arrived. After each store write the progress is
// recorded in one UPDATE; the recorded offset never counts bytes not stored.
type uploadWriter struct {
	s     *Server
	u     provenance.Upload // as recorded
	token string
	h     hash.Hash // the SHA-256 state after u.OffsetBytes bytes
	seg   int64
	// buf holds the bytes from bufStart on that are not in a part; the first
	// hashed of them were read back from a segment and are in h already.
	buf      []byte
	bufStart int64
	hashed   int
	// reread is the short segment read back into buf: rewritten in place by the
	// next segment, or removed once its bytes are in a part.
	reread *provenance.UploadSegment
	// err is why storing failed; the upload stays at its recorded offset.
	err error
}

// newUploadWriter restores the hash state and reads the unfinished segment back, so
// the next store write can extend it.
func (s *Server) newUploadWriter(ctx context.Context, u provenance.Upload, token string, contentLength int64) (*uploadWriter, error) {
	h := sha256.New()
	if err := h.(encoding.BinaryUnmarshaler).UnmarshalBinary(u.HashState); err != nil {
		return nil, fmt.Errorf("upload %s: restoring the hash state: %w", u.ID, err)
	}
	w := &uploadWriter{s: s, u: u, token: token, h: h, seg: s.segmentBytes(), bufStart: u.OffsetBytes}
	var tail []byte
	if n := len(u.Segments); n > 0 && u.Segments[n-1].SizeBytes < w.seg {
		last := u.Segments[n-1]
		r, err := s.objects.Open(ctx, provenance.UploadSegmentKey(u.ID, last.OffsetBytes), 0, last.SizeBytes)
		if err != nil {
			return nil, err
		}
		tail = make([]byte, last.SizeBytes)
		_, err = io.ReadFull(r, tail)
		r.Close()
		if err != nil {
			return nil, fmt.Errorf("upload %s: reading back its last segment: %w", u.ID, err)
		}
		w.u.Segments = slices.Clip(u.Segments[:n-1])
		w.reread, w.bufStart, w.hashed = &last, last.OffsetBytes, len(tail)
	}
	// The buffer is sized to what this request can bring, so small chunks do not
	// each cost a whole segment of memory.
	size := w.seg
	if contentLength >= 0 {
		size = min(size, int64(len(tail))+contentLength)
	}
	w.buf = append(make([]byte, 0, size), tail...)
	return w, nil
}

// limit is how far the buffer fills before it is stored: a segment, the end of the
// part, or the end of the file.
func (w *uploadWriter) limit() int64 {
	end := w.u.LengthBytes
	if !w.u.VerifyOnly() {
		end = w.u.PartEnd()
	}
	return min(w.seg, end-w.bufStart)
}

// errPastLength is a body longer than the upload has room for.
var errPastLength = &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: "the body runs past Upload-Length"}

// receive reads the body to its end, storing as it goes, and returns how the body
// ended (nil for a clean end). A store failure stops it and sits in w.err.
func (w *uploadWriter) receive(ctx context.Context, body io.Reader) error {
	for {
		limit := w.limit()
		if limit == 0 {
			break
		}
		var bodyErr error
		for int64(len(w.buf)) < limit && bodyErr == nil {
			if len(w.buf) == cap(w.buf) {
				// Only a body of unknown or understated length gets here: grow
				// by doubling, never past one segment.
				w.buf = slices.Grow(w.buf, int(min(limit, int64(2*cap(w.buf)+64<<10)))-len(w.buf))
			}
			n, err := body.Read(w.buf[len(w.buf):min(int64(cap(w.buf)), limit)])
			w.buf, bodyErr = w.buf[:len(w.buf)+n], err
		}
		if bodyErr != nil {
			if len(w.buf) > w.hashed {
				w.flush(ctx)
			}
			if bodyErr == io.EOF {
				return nil
			}
			return bodyErr
		}
		if !w.flush(ctx) {
			return nil
		}
	}
	var one [1]byte
	if n, _ := body.Read(one[:]); n > 0 {
		return errPastLength
	}
	return nil
}

// flush stores the buffer as a part or a segment and records the progress. It
// reports whether both worked.
func (w *uploadWriter) flush(ctx context.Context) bool {
	u := w.u
	end := w.bufStart + int64(len(w.buf))
	p := provenance.UploadProgress{OffsetBytes: end, Parts: u.Parts, Segments: u.Segments}
	var drop []provenance.UploadSegment
	switch {
	case u.VerifyOnly():
	case end == u.PartEnd():
		segs := &segmentReader{ctx: ctx, objects: w.s.objects, uploadID: u.ID, segs: u.Segments}
		part, err := w.s.objects.PutPart(ctx, u.ObjectKey, u.MultipartID, len(u.Parts)+1,
			io.MultiReader(segs, bytes.NewReader(w.buf)), end-u.PartStart())
		segs.Close()
		if err != nil {
			w.err = err
			return false
		}
		p.Parts = append(slices.Clip(u.Parts), provenance.UploadPart{Number: part.Number, ETag: part.ETag, SizeBytes: part.Size})
		p.Segments, drop = nil, u.Segments
		if w.reread != nil {
			drop = append(slices.Clip(drop), *w.reread)
		}
	default:
		key := provenance.UploadSegmentKey(u.ID, w.bufStart)
		if _, err := w.s.objects.Put(ctx, key, bytes.NewReader(w.buf), int64(len(w.buf)), objects.PutOptions{}); err != nil {
			w.err = err
			return false
		}
		p.Segments = append(slices.Clip(u.Segments), provenance.UploadSegment{OffsetBytes: w.bufStart, SizeBytes: int64(len(w.buf))})
	}
	w.h.Write(w.buf[w.hashed:])
	state, err := w.h.(encoding.BinaryMarshaler).MarshalBinary()
	if err != nil {
		w.err = err
		return false
	}
	p.HashState = state
	now := w.s.now()
	if err := w.s.store.SaveUploadProgress(ctx, u.ID, w.token, p, uploadLease, now); err != nil {
		w.err = err
		return false
	}
	w.u.OffsetBytes, w.u.Parts, w.u.Segments, w.u.HashState, w.u.LastActivity = p.OffsetBytes, p.Parts, p.Segments, p.HashState, now
	for _, sg := range drop {
		w.s.deleteObject(ctx, provenance.UploadSegmentKey(u.ID, sg.OffsetBytes))
	}
	w.bufStart, w.buf, w.hashed, w.reread = end, w.buf[:0], 0, nil
	return true
}

// segmentReader reads an upload's segments one after another, opening each only
// when the one before is done.
type segmentReader struct {
	ctx      context.Context
	objects  objects.Store
	uploadID string
	segs     []provenance.UploadSegment
	cur      io.ReadCloser
}

func (r *segmentReader) Read(p []byte) (int, error) {
	for {
		if r.cur == nil {
			if len(r.segs) == 0 {
				return 0, io.EOF
			}
			sg := r.segs[0]
			rc, err := r.objects.Open(r.ctx, provenance.UploadSegmentKey(r.uploadID, sg.OffsetBytes), 0, sg.SizeBytes)
			if err != nil {
				return 0, err
			}
			r.cur, r.segs = rc, r.segs[1:]
		}
		n, err := r.cur.Read(p)
		if err == io.EOF {
			r.cur.Close()
			r.cur = nil
			if n > 0 {
				return n, nil
			}
			continue
		}
		return n, err
	}
}

// Close releases the segment being read, if any.
func (r *segmentReader) Close() {
	if r.cur != nil {
		r.cur.Close()
		r.cur = nil
	}
}

// completeUpload turns an upload with all its bytes into a stored file: the digest
// is checked against the declared one (a mismatch discards the upload, and nothing
// ever appears under the content address), the parts are joined, the object moved
// to its content address when it was not there already, and the pending record
// becomes the stored one (or gives way to the record these bytes already have).
func (s *Server) completeUpload(ctx context.Context, w *uploadWriter) (provenance.DataFile, error) {
	u := w.u
	sum := hex.EncodeToString(w.h.Sum(nil))
	if u.DeclaredSHA256 != "" && sum != u.DeclaredSHA256 {
		if err := s.store.DeleteUpload(ctx, u.ID); err != nil {
			return provenance.DataFile{}, err
		}
		s.discardUploadObjects(ctx, u)
		return provenance.DataFile{}, beamledger.InvalidField("Upload-Metadata",
			"sha256: the uploaded bytes do not match the declared digest; the upload is discarded and nothing was stored")
	}
	if !u.VerifyOnly() {
		if err := s.assembleObject(ctx, u, sum); err != nil {
			return provenance.DataFile{}, err
		}
	}
	f, _, err := s.store.FinishUpload(ctx, u.ID, provenance.NewDataFile{ProjectID: u.ProjectID, SHA256: sum, SizeBytes: u.LengthBytes,
		MediaType: u.MediaType, Store: u.Store}, s.now())
	if err != nil {
		return f, err
	}
	s.discardSegments(ctx, u.ID)
	return f, nil
}

// assembleObject joins the parts and puts the object under its content address. A
// request that died after joining or moving left the object behind; a retry finds
// it and goes on.
func (s *Server) assembleObject(ctx context.Context, u provenance.Upload, sum string) error {
	opts := objects.PutOptions{ContentType: u.MediaType}
	if d := s.cfg.ObjectRetention; d > 0 {
		opts.RetainUntil = s.now().Add(d)
	}
	final := provenance.ObjectKey(sum)
	if len(u.Parts) == 0 {
		// An empty file: a multipart upload cannot be completed without a part.
		if _, err := s.objects.Put(ctx, u.ObjectKey, bytes.NewReader(nil), 0, opts); err != nil {
			return err
		}
		_ = s.objects.AbortMultipart(ctx, u.ObjectKey, u.MultipartID)
	} else {
		parts := make([]objects.Part, len(u.Parts))
		for i, p := range u.Parts {
			parts[i] = objects.Part{Number: p.Number, ETag: p.ETag, Size: p.SizeBytes}
		}
		_, err := s.objects.CompleteMultipart(ctx, u.ObjectKey, u.MultipartID, parts, opts)
		if errors.Is(err, beamledger.ErrNotFound) {
			if _, serr := s.objects.Stat(ctx, final); serr == nil {
				return nil
			}
			_, err = s.objects.Stat(ctx, u.ObjectKey)
		}
		if err != nil {
			return err
		}
	}
	if u.ObjectKey != final {
		return s.objects.Promote(ctx, u.ObjectKey, final)
	}
	return nil
}

// discardUploadObjects removes what an abandoned upload left in the store: its
// multipart upload, its segments and an unpromoted object. Failures are logged;
// the cleanup's sweep of unknown leftovers catches them later.
func (s *Server) discardUploadObjects(ctx context.Context, u provenance.Upload) {
	if u.MultipartID != "" {
		if err := s.objects.AbortMultipart(ctx, u.ObjectKey, u.MultipartID); err != nil {
			s.log.Warn("aborting an upload's parts failed", slog.String("upload", u.ID), slog.Any("error", err))
		}
	}
	if u.ObjectKey == provenance.IncomingKey(u.ID) {
		s.deleteObject(ctx, u.ObjectKey)
	}
	s.discardSegments(ctx, u.ID)
}

// discardSegments removes an upload's segment objects.
func (s *Server) discardSegments(ctx context.Context, uploadID string) {
	var keys []string
	err := s.objects.List(ctx, provenance.UploadSegmentPrefix(uploadID), func(i objects.Info) error {
		keys = append(keys, i.Key)
		return nil
	})
	if err != nil {
		s.log.Warn("listing an upload's segments failed", slog.String("upload", uploadID), slog.Any("error", err))
	}
	for _, k := range keys {
		s.deleteObject(ctx, k)
	}
}

// deleteObject removes an object that is no longer needed, logging a failure.
func (s *Server) deleteObject(ctx context.Context, key string) {
	if err := s.objects.Delete(ctx, key); err != nil {
		s.log.Warn("deleting a leftover object failed", slog.String("key", key), slog.Any("error", err))
	}
}
