// Package objectstest gives tests outside storage/objects an S3 store on the test
// harness's S3 server (deploy/testenv starts one and names it in
// BEAMLEDGER_TEST_S3_*), in a fresh bucket per test.
package objectstest

import (
	"context"
	"crypto/rand"
	"io"
	"os"
	"strings"
	"sync"
	"syscall"
	"testing"

	"beamledger/storage/objects"
)

// EnvEndpoint and the others are the variables deploy/testenv sets.
const (
	EnvEndpoint  = "BEAMLEDGER_TEST_S3_ENDPOINT"
	EnvAccessKey = "BEAMLEDGER_TEST_S3_ACCESS_KEY"
	EnvSecretKey = "BEAMLEDGER_TEST_S3_SECRET_KEY"
	EnvRegion    = "BEAMLEDGER_TEST_S3_REGION"
)

// Config describes a fresh bucket on the harness's S3 server. Without the server
// the test fails, saying how to get one, since a skipped S3 test would pass
// unnoticed; with -short it is skipped.
func Config(t testing.TB) objects.S3Config {
	t.Helper()
	endpoint := os.Getenv(EnvEndpoint)
	if endpoint == "" {
		if testing.Short() {
			t.Skip("no S3 server (" + EnvEndpoint + " unset) and -short")
		}
		t.Fatal(EnvEndpoint + " is not set: run the tests under the harness, which starts an S3 server:\n" +
			"\tgo run ./deploy/testenv -- go test ./...\n(or make test; -short skips the S3 tests)")
	}
	return objects.S3Config{
		Endpoint:     endpoint,
		Region:       os.Getenv(EnvRegion),
		Bucket:       "beamledger-test-" + strings.ToLower(rand.Text()[:12]),
		AccessKey:    os.Getenv(EnvAccessKey),
		SecretKey:    os.Getenv(EnvSecretKey),
		PathStyle:    true,
		CreateBucket: true,
	}
}

// NewS3 opens a store on a fresh bucket and empties it after the test.
func NewS3(t testing.TB) *objects.S3 {
	t.Helper()
	return Open(t, Config(t))
}

// Open opens a store on the bucket cfg names (creating it) and empties it after the test.
func Open(t testing.TB, cfg objects.S3Config) *objects.S3 {
	t.Helper()
	s, err := objects.NewS3(context.Background(), cfg)
	if err != nil {
		t.Fatalf("NewS3: %v", err)
	}
	t.Cleanup(func() {
		ctx := context.Background()
		ups, _ := s.ListMultipart(ctx, "")
		for _, u := range ups {
			_ = s.AbortMultipart(ctx, u.Key, u.UploadID)
		}
		var keys []string
		_ = s.List(ctx, "", func(i objects.Info) error { keys = append(keys, i.Key); return nil })
		for _, k := range keys {
			_ = s.Delete(ctx, k)
		}
	})
	return s
}

// BenchObjectBytes is the size of the data-file benchmarks' object: 2 GiB.
const BenchObjectBytes = 2 << 30

// Pattern hands out n bytes of a repeating random 1 MiB block: incompressible and
// cheap to produce, so that a benchmark measures the store, not its source, and
// needs no memory of the object's size.
type Pattern struct {
	block []byte
	off   int
	left  int64
}

// NewPattern makes a pattern of n bytes starting shift bytes into the block; every
// pattern of one process repeats the same block, so patterns of one length and
// shift hold the same bytes and different shifts give different bytes.
func NewPattern(n int64, shift int) *Pattern {
	b := patternBlock()
	return &Pattern{block: b, left: n, off: shift % len(b)}
}

// patternBlock is the block every Pattern of the process repeats.
var patternBlock = sync.OnceValue(func() []byte {
	b := make([]byte, 1<<20)
	_, _ = rand.Read(b)
	return b
})

// Read implements io.Reader.
func (p *Pattern) Read(buf []byte) (int, error) {
	if p.left == 0 {
		return 0, io.EOF
	}
	n := copy(buf[:min(int64(len(buf)), p.left)], p.block[p.off:])
	p.off = (p.off + n) % len(p.block)
	p.left -= int64(n)
	return n, nil
}

// Settle writes every dirty page back to disk (sync(2)) with b's timer stopped, so
// that a timed upload starts as the anchor's does and does not pay for the
// writeback of what the run before stored.
func Settle(b *testing.B) {
	b.StopTimer()
	syscall.Sync()
	b.StartTimer()
}
