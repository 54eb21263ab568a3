package server

import (
	"context"
	"log/slog"
	"strings"
	"time"

	"beamledger/storage/objects"
)

// uploadCleanupLock is the PostgreSQL advisory lock key that lets one process at a
// time sweep abandoned uploads: "blupcln" in ASCII, a constant no other lock uses.
const uploadCleanupLock int64 = 0x62_6c_75_70_63_6c_6e

// CleanupReport counts what one sweep removed.
type CleanupReport struct {
	// Uploads are expired uploads: parts aborted, segments and pending record removed.
	Uploads int
	// Multiparts are store multipart uploads no upload knows (their process died
	// between creating them and recording them, or a single-request upload died).
	Multiparts int
	// Objects are temporary objects no upload knows.
	Objects int
}

// cleanupEvery runs the sweep at start and then at a quarter of the expiry (at
// least a second, at most five minutes) until ctx ends, so a process restarted
// after a crash clears what the crash left once it has aged.
func (s *Server) cleanupEvery(ctx context.Context) {
	every := min(max(s.cfg.UploadExpiry/4, time.Second), 5*time.Minute)
	for {
		rep, ran, err := s.CleanupUploads(ctx)
		switch {
		case err != nil && ctx.Err() == nil:
			s.log.Warn("upload cleanup failed", slog.Any("error", err))
		case ran && rep != (CleanupReport{}):
			s.log.Info("upload cleanup", slog.Int("uploads", rep.Uploads), slog.Int("multiparts", rep.Multiparts), slog.Int("objects", rep.Objects))
		}
		select {
		case <-ctx.Done():
			return
		case <-time.After(every):
		}
	}
}

// CleanupUploads sweeps once, unless another process is sweeping (ran false):
// uploads idle longer than the expiry are discarded, then store multipart uploads
// and temporary objects older than the expiry that no upload knows.
func (s *Server) CleanupUploads(ctx context.Context) (rep CleanupReport, ran bool, err error) {
	start, before := time.Now(), s.now().Add(-s.cfg.UploadExpiry)
	defer func() {
		if ran || err != nil {
			// A sweep another process is making is not a run here.
			s.jobDone(ctx, jobUploadCleanup, start, err)
		}
	}()
	ran, err = s.store.TryExclusive(ctx, uploadCleanupLock, func(ctx context.Context) error {
		var err error
		rep, err = s.sweepUploads(ctx, before)
		return err
	})
	return rep, ran, err
}

func (s *Server) sweepUploads(ctx context.Context, before time.Time) (CleanupReport, error) {
	var rep CleanupReport
	for {
		// The rows go first: a PATCH arriving after this finds no upload, instead
		// of writing parts about to be aborted.
		expired, err := s.store.ClaimExpiredUploads(ctx, before, 100)
		if err != nil {
			return rep, err
		}
		for _, u := range expired {
			s.discardUploadObjects(ctx, u)
		}
		rep.Uploads += len(expired)
		if len(expired) < 100 {
			break
		}
	}
	n, err := s.sweepMultiparts(ctx, before)
	rep.Multiparts = n
	if err != nil {
		return rep, err
	}
	rep.Objects, err = s.sweepObjects(ctx, before)
	return rep, err
}

// sweepMultiparts aborts multipart uploads under the keys uploads write to that
// began before the cut-off and that no upload row knows.
func (s *Server) sweepMultiparts(ctx context.Context, before time.Time) (int, error) {
	known, err := s.store.UploadMultipartIDs(ctx)
	if err != nil {
		return 0, err
	}
	n := 0
	for _, prefix := range []string{"incoming/", "sha256/"} {
		pending, err := s.objects.ListMultipart(ctx, prefix)
		if err != nil {
			return n, err
		}
		for _, p := range pending {
			if known[p.UploadID] || !p.Initiated.Before(before) {
				continue
			}
			if err := s.objects.AbortMultipart(ctx, p.Key, p.UploadID); err != nil {
				return n, err
			}
			n++
		}
	}
	return n, nil
}

// sweepObjects removes temporary objects (incoming/<id>, uploads/<id>/…) written
// before the cut-off whose upload is no longer recorded. Single-request uploads
// use incoming/ too, for seconds; one that old died half-way.
func (s *Server) sweepObjects(ctx context.Context, before time.Time) (int, error) {
	byUpload := map[string][]string{}
	for _, prefix := range []string{"incoming/", "uploads/"} {
		err := s.objects.List(ctx, prefix, func(i objects.Info) error {
			if i.Modified.Before(before) {
				id, _, _ := strings.Cut(strings.TrimPrefix(i.Key, prefix), "/")
				byUpload[id] = append(byUpload[id], i.Key)
			}
			return nil
		})
		if err != nil {
			return 0, err
		}
	}
	if len(byUpload) == 0 {
		return 0, nil
	}
	ids := make([]string, 0, len(byUpload))
	for id := range byUpload {
		ids = append(ids, id)
	}
	live, err := s.store.UploadIDs(ctx, ids)
	if err != nil {
		return 0, err
	}
	n := 0
	for id, keys := range byUpload {
		if live[id] {
			continue
		}
		for _, k := range keys {
			if err := s.objects.Delete(ctx, k); err != nil {
				return n, err
			}
			n++
		}
	}
	return n, nil
}
