package objects

import (
	"errors"
	"io"
	"runtime"
	"runtime/debug"
	"strings"
	"testing"
	"time"

	"github.com/minio/minio-go/v7"

	"beamledger"
	"beamledger/deploy/s3server"
)

// TestS3Unavailable stops a private S3 server under a connected store: every
// call must then say ErrUnavailable with the message meant for users, not a
// transport error, and so must connecting.
func TestS3Unavailable(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a versitygw of its own")
	}
	ctx := t.Context()
	bin, err := s3server.EnsureBinary(ctx, "", io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	srv, err := s3server.Start(ctx, s3server.Options{Binary: bin})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop() })
	cfg := S3Config{
		Endpoint: srv.Endpoint, Region: srv.Region, Bucket: "down",
		AccessKey: srv.AccessKey, SecretKey: srv.SecretKey,
		PathStyle: true, CreateBucket: true,
		MaxAttempts: 1, // no back-off: the server is not coming back
	}
	st, err := NewS3(ctx, cfg)
	if err != nil {
		t.Fatal(err)
	}
	put(t, st, "k", []byte("x"))
	id, err := st.CreateMultipart(ctx, "m")
	if err != nil {
		t.Fatal(err)
	}
	if err := srv.Stop(); err != nil {
		t.Fatal(err)
	}

	calls := map[string]func() error{
		"Put": func() error {
			_, err := st.Put(ctx, "k2", strings.NewReader("y"), 1, PutOptions{})
			return err
		},
		"Put unknown size": func() error {
			_, err := st.Put(ctx, "k3", strings.NewReader("y"), -1, PutOptions{})
			return err
		},
		"Stat":            func() error { _, err := st.Stat(ctx, "k"); return err },
		"Open":            func() error { _, err := st.Open(ctx, "k", 0, -1); return err },
		"Delete":          func() error { return st.Delete(ctx, "k") },
		"Promote":         func() error { return st.Promote(ctx, "k", "k4") },
		"List":            func() error { return st.List(ctx, "", func(Info) error { return nil }) },
		"CreateMultipart": func() error { _, err := st.CreateMultipart(ctx, "m2"); return err },
		"PutPart": func() error {
			_, err := st.PutPart(ctx, "m", id, 1, strings.NewReader("z"), 1)
			return err
		},
		"AbortMultipart": func() error { return st.AbortMultipart(ctx, "m", id) },
		"ListMultipart":  func() error { _, err := st.ListMultipart(ctx, ""); return err },
		"NewS3":          func() error { _, err := NewS3(ctx, cfg); return err },
	}
	for name, call := range calls {
		err := call()
		wantKind(t, err, beamledger.ErrUnavailable, name)
		var de *beamledger.Error
		if errors.As(err, &de) && de.Message != unavailableMessage {
			t.Errorf("%s: message %q", name, de.Message)
		}
	}
}

// TestS3ObjectLock checks that RetainUntil becomes governance-mode retention
// in a locking bucket, through Put, CompleteMultipart and Promote, and is
// ignored in a bucket without locking.
func TestS3ObjectLock(t *testing.T) {
	cfg := harnessS3Config(t)
	cfg.ObjectLock = true
	st := newTestS3(t, cfg)
	if !st.ObjectLocking() {
		t.Fatal("bucket created with ObjectLock does not lock")
	}
	ctx := t.Context()
	until := time.Now().Add(time.Hour).Truncate(time.Second)
	if _, err := st.Put(ctx, "incoming/1", strings.NewReader("x"), 1, PutOptions{RetainUntil: until}); err != nil {
		t.Fatal(err)
	}
	wantRetention(t, st, "incoming/1", until)
	if err := st.Promote(ctx, "incoming/1", "sha256/x"); err != nil {
		t.Fatal(err)
	}
	wantRetention(t, st, "sha256/x", until)
	if _, err := st.Stat(ctx, "incoming/1"); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("the promoted source is still there: %v", err)
	}

	id, err := st.CreateMultipart(ctx, "mp")
	if err != nil {
		t.Fatal(err)
	}
	p, err := st.PutPart(ctx, "mp", id, 1, strings.NewReader("abc"), 3)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.CompleteMultipart(ctx, "mp", id, []Part{p}, PutOptions{RetainUntil: until}); err != nil {
		t.Fatal(err)
	}
	wantRetention(t, st, "mp", until)

	// Compliance mode: even the governance bypass the store's own deletes use
	// cannot remove the object before its time.
	if _, err := st.Put(ctx, "ledger/checkpoints/1", strings.NewReader("note"), 4, PutOptions{RetainUntil: until, Compliance: true}); err != nil {
		t.Fatal(err)
	}
	if oi, err := st.client.StatObject(ctx, st.bucket, "ledger/checkpoints/1", minio.StatObjectOptions{}); err != nil {
		t.Fatal(err)
	} else if mode, got := retentionOf(oi); mode != minio.Compliance || !got.Equal(until) {
		t.Errorf("compliance retention: %v until %v, want COMPLIANCE until %v", mode, got, until)
	}
	if err := st.Delete(ctx, "ledger/checkpoints/1"); err == nil {
		if _, serr := st.Stat(ctx, "ledger/checkpoints/1"); serr != nil {
			t.Errorf("an object under compliance retention was deleted: %v", serr)
		}
	}

	put(t, st, "plain", []byte("x"))
	if oi, err := st.client.StatObject(ctx, st.bucket, "plain", minio.StatObjectOptions{}); err != nil {
		t.Fatal(err)
	} else if mode, _ := retentionOf(oi); mode != "" {
		t.Errorf("object put without RetainUntil is retained (%s)", mode)
	}

	// Without locking, RetainUntil is dropped and the Put still works.
	plain := newTestS3(t, harnessS3Config(t))
	if plain.ObjectLocking() {
		t.Fatal("bucket created without ObjectLock locks")
	}
	if _, err := plain.Put(ctx, "k", strings.NewReader("x"), 1, PutOptions{RetainUntil: until}); err != nil {
		t.Fatal(err)
	}
	// And a locking store refuses a bucket that cannot lock.
	lockCfg := harnessS3Config(t)
	lockCfg.Bucket, lockCfg.ObjectLock = plain.bucket, true
	if _, err := NewS3(ctx, lockCfg); err == nil {
		t.Error("NewS3 with ObjectLock accepted a bucket without locking")
	}
}

func wantRetention(t *testing.T, st *S3, key string, until time.Time) {
	t.Helper()
	// Read from HEAD: see retentionOf for why not GetObjectRetention.
	oi, err := st.client.StatObject(t.Context(), st.bucket, key, minio.StatObjectOptions{})
	if err != nil {
		t.Fatalf("retention of %s: %v", key, err)
	}
	if mode, got := retentionOf(oi); mode != minio.Governance || !got.Equal(until) {
		t.Errorf("retention of %s: %v until %v, want GOVERNANCE until %v", key, mode, got, until)
	}
}

// TestS3Config checks that bad settings are refused before any request.
func TestS3Config(t *testing.T) {
	for name, cfg := range map[string]S3Config{
		"scheme":     {Endpoint: "http://127.0.0.1:1", Bucket: "b"},
		"no bucket":  {Endpoint: "127.0.0.1:1"},
		"small part": {Endpoint: "127.0.0.1:1", Bucket: "b", PartSize: 1 << 20},
		"huge part":  {Endpoint: "127.0.0.1:1", Bucket: "b", PartSize: 6 << 30},
	} {
		_, err := NewS3(t.Context(), cfg)
		wantKind(t, err, beamledger.ErrInvalid, name)
	}
}

// TestS3MissingBucket: without CreateBucket a missing bucket is an error at
// NewS3, not at the first Put.
func TestS3MissingBucket(t *testing.T) {
	cfg := harnessS3Config(t)
	cfg.CreateBucket = false
	if _, err := NewS3(t.Context(), cfg); err == nil || !strings.Contains(err.Error(), cfg.Bucket) {
		t.Errorf("NewS3 on a missing bucket: %v", err)
	}
}

// TestPartSizeFor: a known size never needs more than S3's 10 000 parts.
func TestPartSizeFor(t *testing.T) {
	s := &S3{partSize: DefaultPartSize}
	for _, size := range []int64{-1, 0, 1, DefaultPartSize * maxPartNumber, DefaultPartSize*maxPartNumber + 1, 1 << 40, 5 << 40} {
		ps := s.partSizeFor(size)
		if ps < DefaultPartSize || ps%(1<<20) != 0 {
			t.Errorf("size %d: part size %d", size, ps)
		}
		if size > 0 && (uint64(size)+ps-1)/ps > maxPartNumber {
			t.Errorf("size %d: part size %d needs %d parts", size, ps, (uint64(size)+ps-1)/ps)
		}
	}
}

// TestS3PutMemory bounds the heap a Put of unknown size needs: about two
// parts (one being read, one being sent), however long the stream. With the
// collector made eager, the peak heap follows what is live; a Put that
// buffered the whole object (or a part per default thread) would show 40 MiB
// (or four parts and more) here.
func TestS3PutMemory(t *testing.T) {
	st := newTestS3(t, harnessS3Config(t))
	const size = 8 * testPartSize
	defer debug.SetGCPercent(debug.SetGCPercent(5))
	runtime.GC()
	var base runtime.MemStats
	runtime.ReadMemStats(&base)
	peak := base.HeapAlloc
	done, sampled := make(chan struct{}), make(chan struct{})
	go func() {
		defer close(sampled)
		var m runtime.MemStats
		for {
			select {
			case <-done:
				return
			case <-time.After(5 * time.Millisecond):
				runtime.ReadMemStats(&m)
				peak = max(peak, m.HeapAlloc)
			}
		}
	}()
	_, err := st.Put(t.Context(), "big", onlyReader{io.LimitReader(zeroReader{}, size)}, -1, PutOptions{})
	close(done)
	<-sampled
	if err != nil {
		t.Fatal(err)
	}
	if grown := peak - base.HeapAlloc; grown > 3*testPartSize {
		t.Errorf("Put of %d MiB of unknown size grew the heap by %d MiB; want about two %d MiB parts",
			size>>20, grown>>20, testPartSize>>20)
	} else {
		t.Logf("heap grew by at most %.1f MiB", float64(grown)/(1<<20))
	}
	if info, err := st.Stat(t.Context(), "big"); err != nil || info.Size != size {
		t.Errorf("Stat = %+v, %v", info, err)
	}
}

type zeroReader struct{}

func (zeroReader) Read(p []byte) (int, error) { clear(p); return len(p), nil }
