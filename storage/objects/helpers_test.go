package objects

import (
	"bytes"
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"io"
	mrand "math/rand/v2"
	"os"
	"strings"
	"testing"

	"github.com/minio/minio-go/v7"

	"beamledger"
)

// The variables deploy/testenv sets for the harness's S3 server.
const (
	envS3Endpoint  = "BEAMLEDGER_TEST_S3_ENDPOINT"
	envS3AccessKey = "BEAMLEDGER_TEST_S3_ACCESS_KEY"
	envS3SecretKey = "BEAMLEDGER_TEST_S3_SECRET_KEY"
	envS3Region    = "BEAMLEDGER_TEST_S3_REGION"
)

// testPartSize is S3's least part size, so that "larger than one part"
// needs only a few MiB of test data.
const testPartSize = 5 << 20

// harnessS3Config describes a fresh bucket on the harness's S3 server. Without
// the server the test fails, saying how to get one, since a skipped S3 suite
// would pass unnoticed; -short skips instead.
func harnessS3Config(t *testing.T) S3Config {
	t.Helper()
	endpoint := os.Getenv(envS3Endpoint)
	if endpoint == "" {
		if testing.Short() {
			t.Skip("no S3 server (" + envS3Endpoint + " unset) and -short")
		}
		t.Fatal(envS3Endpoint + " is not set: run the tests under the harness, which starts an S3 server:\n" +
			"\tgo run ./deploy/testenv -- go test ./storage/objects/\n(or make test; -short skips the S3 tests)")
	}
	return S3Config{
		Endpoint:     endpoint,
		Region:       os.Getenv(envS3Region),
		Bucket:       "beamledger-test-" + strings.ToLower(rand.Text()[:12]),
		AccessKey:    os.Getenv(envS3AccessKey),
		SecretKey:    os.Getenv(envS3SecretKey),
		PathStyle:    true,
		CreateBucket: true,
		PartSize:     testPartSize,
	}
}

// newTestS3 connects to a fresh bucket and removes it, with whatever is
// left in it, after the test.
func newTestS3(t *testing.T, cfg S3Config) *S3 {
	t.Helper()
	s, err := NewS3(t.Context(), cfg)
	if err != nil {
		t.Fatalf("NewS3: %v", err)
	}
	t.Cleanup(func() { removeBucket(t, s) })
	return s
}

// removeBucket empties and deletes the test bucket, so a shared server
// (one CI provides) does not fill up with test buckets. Objects under
// governance retention go too, by bypassing it.
func removeBucket(t *testing.T, s *S3) {
	ctx := context.Background()
	ups, _ := s.ListMultipart(ctx, "")
	for _, u := range ups {
		_ = s.AbortMultipart(ctx, u.Key, u.UploadID)
	}
	for oi := range s.client.ListObjects(ctx, s.bucket, minio.ListObjectsOptions{Recursive: true, WithVersions: s.locking}) {
		if oi.Err != nil {
			break
		}
		// versitygw lists the versions of an unversioned bucket as "null"
		// but refuses "null" as a version to delete.
		version := oi.VersionID
		if version == "null" {
			version = ""
		}
		_ = s.client.RemoveObject(ctx, s.bucket, oi.Key, minio.RemoveObjectOptions{VersionID: version, GovernanceBypass: true})
	}
	if err := s.client.RemoveBucket(ctx, s.bucket); err != nil {
		t.Logf("removing test bucket %s: %v", s.bucket, err)
	}
}

// randomBytes returns n bytes from a seeded generator: random enough that no
// compression or deduplication helps, and the same on every run.
func randomBytes(n int, seed uint64) []byte {
	b := make([]byte, n)
	r := mrand.NewChaCha8([32]byte{byte(seed), byte(seed >> 8), byte(seed >> 16)})
	_, _ = r.Read(b)
	return b
}

// onlyReader hides every method but Read, as a network body would.
type onlyReader struct{ r io.Reader }

func (o onlyReader) Read(p []byte) (int, error) { return o.r.Read(p) }

func sha256Hex(b []byte) string {
	sum := sha256.Sum256(b)
	return hex.EncodeToString(sum[:])
}

// put stores data under key or fails the test.
func put(t *testing.T, st Store, key string, data []byte) Info {
	t.Helper()
	info, err := st.Put(t.Context(), key, bytes.NewReader(data), int64(len(data)), PutOptions{})
	if err != nil {
		t.Fatalf("Put %s: %v", key, err)
	}
	return info
}

// read returns the bytes of a range or fails the test.
func read(t *testing.T, st Store, key string, offset, length int64) []byte {
	t.Helper()
	rc, err := st.Open(t.Context(), key, offset, length)
	if err != nil {
		t.Fatalf("Open %s [%d,%d]: %v", key, offset, length, err)
	}
	defer rc.Close()
	b, err := io.ReadAll(rc)
	if err != nil {
		t.Fatalf("reading %s [%d,%d]: %v", key, offset, length, err)
	}
	return b
}

// wantKind fails the test unless err is of the given domain kind.
func wantKind(t *testing.T, err, kind error, what string) {
	t.Helper()
	if !errors.Is(err, kind) {
		t.Errorf("%s: got error %v, want %v", what, err, kind)
	}
	var de *beamledger.Error
	if err != nil && !errors.As(err, &de) {
		t.Errorf("%s: %v carries no beamledger.Error with a user message", what, err)
	}
}

// keys lists the keys under prefix, in the order List gives them.
func keys(t *testing.T, st Store, prefix string) []string {
	t.Helper()
	var out []string
	if err := st.List(t.Context(), prefix, func(i Info) error {
		out = append(out, i.Key)
		return nil
	}); err != nil {
		t.Fatalf("List %q: %v", prefix, err)
	}
	return out
}

// pending lists the upload ids pending under prefix.
func pending(t *testing.T, st Store, prefix string) []string {
	t.Helper()
	ups, err := st.ListMultipart(t.Context(), prefix)
	if err != nil {
		t.Fatalf("ListMultipart %q: %v", prefix, err)
	}
	var ids []string
	for _, u := range ups {
		ids = append(ids, u.UploadID)
	}
	return ids
}
