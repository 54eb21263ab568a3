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
//
// Receiving and storing overlap: while full buffers are stored and recorded, the
// next fills from the body and is hashed. A buffer that is a whole part by itself
// (the usual case, where parts are one segment long) is sent while the one before
// is still being sent, up to maxStores at once; any other waits for every store
// before it, since it builds on what they recorded. A PATCH so holds at most
// maxStores+1 segments in memory. Progress is recorded strictly in order: each
// store, once its bytes are in the object store, waits for the one before to be
// recorded, and records nothing if that one failed. Each records the hash state
// taken when its bytes were hashed, so the recorded state always matches the
// recorded offset.
type uploadWriter struct {
	s     *Server
	token string
	seg   int64
	// The upload's identity and geometry, which never change and which the
	// receiving side and stores in flight read while another store may be
	// updating u.
	id, objectKey, multipartID string
	length, partBytes          int64
	verifyOnly                 bool

	// Storing side: touched by the stores, one at a time and in order, when
	// they record (or fail), or by anyone once every store is waited for.
	u provenance.Upload // as recorded
	// err is why storing failed; the upload stays at its recorded offset.
	err error

	// Receiving side: the hash, the buffer filling from the body, and the stores
	// in flight. h is the SHA-256 state after the bytes received so far: once
	// receive returns with no store failure, those are u.OffsetBytes bytes.
	h       hash.Hash
	fill    batch
	running []*storeRun // oldest first
	failed  bool        // a store that ended reported failure
	spare   [][]byte    // buffers no store holds, for the next bytes
}

// maxStores is how many whole parts one PATCH sends at once: two keep the S3
// server busy while the next part's request begins, with a third buffer filling.
const maxStores = 2

// storeRun is one buffer's store in flight.
type storeRun struct {
	done chan struct{} // closed when it has recorded or failed
	ok   bool          // set before done is closed
	buf  []byte        // the buffer it holds
}

// batch is received bytes on their way to the store.
type batch struct {
	buf   []byte
	start int64 // the file offset of buf[0]
	// hashed is how many of the first bytes were read back from a segment and
	// are in h already.
	hashed int
	// reread is the short segment read back into buf: rewritten in place by the
	// next segment, or removed once its bytes are in a part.
	reread *provenance.UploadSegment
	// hashState is the SHA-256 state after buf's last byte.
	hashState []byte
}

// newUploadWriter restores the hash state and reads the unfinished segment back, so
// the next store write can extend it.
func (s *Server) newUploadWriter(ctx context.Context, u provenance.Upload, token string, contentLength int64) (*uploadWriter, error) {
	h := sha256.New()
	if err := h.(encoding.BinaryUnmarshaler).UnmarshalBinary(u.HashState); err != nil {
		return nil, fmt.Errorf("upload %s: restoring the hash state: %w", u.ID, err)
	}
	w := &uploadWriter{s: s, u: u, token: token, h: h, seg: s.segmentBytes(),
		id: u.ID, objectKey: u.ObjectKey, multipartID: u.MultipartID,
		length: u.LengthBytes, partBytes: u.PartSizeBytes, verifyOnly: u.VerifyOnly(), fill: batch{start: u.OffsetBytes}}
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
		w.fill.reread, w.fill.start, w.fill.hashed = &last, last.OffsetBytes, len(tail)
	}
	// The buffer is sized to what this request can bring, so small chunks do not
	// each cost a whole segment of memory.
	size := w.seg
	if contentLength >= 0 {
		size = min(size, int64(len(tail))+contentLength)
	}
	w.fill.buf = append(make([]byte, 0, size), tail...)
	return w, nil
}

// limit is how far the buffer starting at start fills before it is stored: a
// segment, the end of the part, or the end of the file. The part's end comes from
// the part size, not the recorded parts, which lag while the buffers before are
// being stored; parts are all of the part size, so the two agree.
func (w *uploadWriter) limit(start int64) int64 {
	end := w.length
	if !w.verifyOnly && w.partBytes > 0 {
		end = min(start-start%w.partBytes+w.partBytes, end)
	}
	return min(w.seg, end-start)
}

// endsPart reports whether a buffer ending at end completes a part: at a
// multiple of the part size, or at the end of the file.
func (w *uploadWriter) endsPart(end int64) bool {
	return end == w.length || (w.partBytes > 0 && end%w.partBytes == 0)
}

// partStart is where the part holding the byte before end begins.
func (w *uploadWriter) partStart(end int64) int64 {
	if w.partBytes <= 0 || end <= 0 {
		return 0
	}
	return (end - 1) / w.partBytes * w.partBytes
}

// wholePart reports whether b is a whole part by itself: it needs nothing stored
// before it, so it can be sent while the stores before it run.
func (w *uploadWriter) wholePart(b batch) bool {
	end := b.start + int64(len(b.buf))
	return !w.verifyOnly && w.partBytes > 0 && b.reread == nil && len(b.buf) > 0 &&
		b.start%w.partBytes == 0 && w.endsPart(end)
}

// errPastLength is a body longer than the upload has room for.
var errPastLength = &beamledger.Error{Kind: beamledger.ErrTooLarge, Message: "the body runs past Upload-Length"}

// receive reads the body to its end, storing as it goes, and returns how the body
// ended (nil for a clean end). A store failure stops it and sits in w.err. It
// returns only once no store runs, so w.u and w.h are settled.
func (w *uploadWriter) receive(ctx context.Context, body io.Reader) error {
	defer w.waitAll()
	for {
		limit := w.limit(w.fill.start)
		if limit == 0 {
			break
		}
		bodyErr := w.read(body, limit)
		// Hashing here, while the stores before run, keeps it off the stores'
		// critical path.
		hashErr := w.hashFill()
		alone := bodyErr == nil && hashErr == nil && w.wholePart(w.fill)
		if !w.waitFor(alone) {
			return nil
		}
		if hashErr != nil {
			w.err = hashErr // every store is done: alone is false
			return nil
		}
		if bodyErr != nil {
			if len(w.fill.buf) > w.fill.hashed {
				w.flush(ctx, w.fill)
			}
			if bodyErr == io.EOF {
				return nil
			}
			return bodyErr
		}
		w.store(ctx)
	}
	if !w.waitAll() {
		return nil
	}
	var one [1]byte
	if n, _ := body.Read(one[:]); n > 0 {
		return errPastLength
	}
	return nil
}

// read fills the buffer from the body up to limit bytes, or until the body ends.
func (w *uploadWriter) read(body io.Reader, limit int64) error {
	b := w.fill.buf
	defer func() { w.fill.buf = b }()
	for int64(len(b)) < limit {
		if len(b) == cap(b) {
			// Only a body of unknown or understated length gets here: grow by
			// doubling, never past one segment.
			b = slices.Grow(b, int(min(limit, int64(2*cap(b)+64<<10)))-len(b))
		}
		n, err := body.Read(b[len(b):min(int64(cap(b)), limit)])
		b = b[:len(b)+n]
		if err != nil {
			return err
		}
	}
	return nil
}

// hashFill adds the buffer's new bytes to the hash and keeps the state after them
// for the buffer's store to record.
func (w *uploadWriter) hashFill() error {
	w.h.Write(w.fill.buf[w.fill.hashed:])
	state, err := w.h.(encoding.BinaryMarshaler).MarshalBinary()
	w.fill.hashState = state
	return err
}

// store hands the full buffer to a store running in the background and takes a
// spare buffer for the next bytes. Only a whole part may start while other stores
// run, and then fewer than maxStores.
func (w *uploadWriter) store(ctx context.Context) {
	full := w.fill
	var next []byte
	if n := len(w.spare); n > 0 {
		next, w.spare = w.spare[n-1], w.spare[:n-1]
	} else {
		next = make([]byte, 0, cap(full.buf))
	}
	w.fill = batch{buf: next[:0], start: full.start + int64(len(full.buf))}
	var prev *storeRun
	if n := len(w.running); n > 0 {
		prev = w.running[n-1]
	}
	r := &storeRun{done: make(chan struct{}), buf: full.buf}
	w.running = append(w.running, r)
	go func() {
		defer close(r.done)
		wrote, err := w.write(ctx, full)
		if prev != nil {
			// Record in order: after the store before, and only if it worked.
			<-prev.done
			if !prev.ok {
				return
			}
		}
		if err != nil {
			w.err = err
			return
		}
		r.ok = w.record(ctx, full, wrote)
	}()
}

// waitFor waits for the stores in flight to leave room for the next buffer's: one
// place when it is a whole part (alone), all of them otherwise. It frees their
// buffers and reports whether storing has worked so far.
func (w *uploadWriter) waitFor(alone bool) bool {
	keep := 0
	if alone {
		keep = maxStores - 1
	}
	for len(w.running) > keep {
		r := w.running[0]
		<-r.done
		w.running = w.running[1:]
		w.spare = append(w.spare, r.buf[:0])
		w.failed = w.failed || !r.ok
	}
	return !w.failed
}

// waitAll waits for every store in flight and reports whether storing has worked.
func (w *uploadWriter) waitAll() bool { return w.waitFor(false) && w.err == nil }

// flush stores b and records the progress, in the request's goroutine, with no
// store in flight. It reports whether both worked.
func (w *uploadWriter) flush(ctx context.Context, b batch) bool {
	wrote, err := w.write(ctx, b)
	if err != nil {
		w.err = err
		return false
	}
	return w.record(ctx, b, wrote)
}

// written is what a store write put in the object store: a part, a segment, or
// nothing (an upload that only verifies bytes already stored).
type written struct {
	part    *objects.Part
	segment *provenance.UploadSegment
}

// write puts b's bytes in the object store: as a part when b ends one (streaming
// the part's earlier bytes back from its segments), else as a segment. A panic
// becomes the error it stands for: it would otherwise escape the request's
// recovery when b is stored in the background, and end the process. Only a whole
// part (wholePart) is written while stores before it run; anything else reads
// w.u, which is settled then.
func (w *uploadWriter) write(ctx context.Context, b batch) (wr written, err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("storing an upload part panicked: %v", r)
		}
	}()
	end := b.start + int64(len(b.buf))
	switch {
	case w.verifyOnly:
		return written{}, nil
	case w.endsPart(end):
		start := w.partStart(end)
		var segs []provenance.UploadSegment
		if b.start > start {
			segs = w.u.Segments
		}
		// A part held whole goes as a bytes.Reader, which the store may read
		// twice: S3 then sends the part's CRC32C ahead of it, sparing the S3
		// server the chunked framing a trailer needs.
		var body io.Reader = bytes.NewReader(b.buf)
		if len(segs) > 0 {
			sr := &segmentReader{ctx: ctx, objects: w.s.objects, uploadID: w.id, segs: segs}
			defer sr.Close()
			body = io.MultiReader(sr, body)
		}
		part, err := w.s.objects.PutPart(ctx, w.objectKey, w.multipartID, int(start/max(w.partBytes, 1))+1, body, end-start)
		if err != nil {
			return written{}, err
		}
		return written{part: &part}, nil
	default:
		key := provenance.UploadSegmentKey(w.id, b.start)
		if _, err := w.s.objects.Put(ctx, key, bytes.NewReader(b.buf), int64(len(b.buf)), objects.PutOptions{}); err != nil {
			return written{}, err
		}
		return written{segment: &provenance.UploadSegment{OffsetBytes: b.start, SizeBytes: int64(len(b.buf))}}, nil
	}
}

// record records the progress b's write made, after every store before it has
// recorded. It reports whether that worked.
func (w *uploadWriter) record(ctx context.Context, b batch, wr written) (ok bool) {
	defer func() {
		if r := recover(); r != nil {
			w.err = fmt.Errorf("recording an upload's progress panicked: %v", r)
			ok = false
		}
	}()
	u := w.u
	end := b.start + int64(len(b.buf))
	p := provenance.UploadProgress{OffsetBytes: end, Parts: u.Parts, Segments: u.Segments}
	var drop []provenance.UploadSegment
	switch {
	case wr.part != nil:
		if wr.part.Number != len(u.Parts)+1 {
			w.err = fmt.Errorf("upload %s: part %d stored after %d recorded parts", u.ID, wr.part.Number, len(u.Parts))
			return false
		}
		p.Parts = append(slices.Clip(u.Parts), provenance.UploadPart{Number: wr.part.Number, ETag: wr.part.ETag, SizeBytes: wr.part.Size})
		p.Segments, drop = nil, u.Segments
		if b.reread != nil {
			drop = append(slices.Clip(drop), *b.reread)
		}
	case wr.segment != nil:
		p.Segments = append(slices.Clip(u.Segments), *wr.segment)
	}
	p.HashState = b.hashState
	now := w.s.now()
	if err := w.s.store.SaveUploadProgress(ctx, u.ID, w.token, p, uploadLease, now); err != nil {
		w.err = err
		return false
	}
	w.u.OffsetBytes, w.u.Parts, w.u.Segments, w.u.HashState, w.u.LastActivity = p.OffsetBytes, p.Parts, p.Segments, p.HashState, now
	for _, sg := range drop {
		w.s.deleteObject(ctx, provenance.UploadSegmentKey(u.ID, sg.OffsetBytes))
	}
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
//
// declaredIn names the field that declared the digest, for the refusal.
func (s *Server) completeUpload(ctx context.Context, w *uploadWriter, declaredIn string) (provenance.DataFile, error) {
	u := w.u
	sum := hex.EncodeToString(w.h.Sum(nil))
	if u.DeclaredSHA256 != "" && sum != u.DeclaredSHA256 {
		if err := s.store.DeleteUpload(ctx, u.ID); err != nil {
			return provenance.DataFile{}, err
		}
		s.discardUploadObjects(ctx, u)
		return provenance.DataFile{}, beamledger.InvalidField(declaredIn,
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
			s.log.WarnContext(ctx, "aborting an upload's parts failed", slog.String("upload", u.ID), slog.Any("error", err))
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
		s.log.WarnContext(ctx, "listing an upload's segments failed", slog.String("upload", uploadID), slog.Any("error", err))
	}
	for _, k := range keys {
		s.deleteObject(ctx, k)
	}
}

// deleteObject removes an object that is no longer needed, logging a failure.
func (s *Server) deleteObject(ctx context.Context, key string) {
	if err := s.objects.Delete(ctx, key); err != nil {
		s.log.WarnContext(ctx, "deleting a leftover object failed", slog.String("key", key), slog.Any("error", err))
	}
}
