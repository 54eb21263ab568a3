// Package objectstest gives tests outside storage/objects an S3 store on the test
// harness's S3 server (deploy/testenv starts one and names it in
// BEAMLEDGER_TEST_S3_*), in a fresh bucket per test.
package objectstest

import (
	"context"
	"crypto/rand"
	"os"
	"strings"
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
	s, err := objects.NewS3(context.Background(), Config(t))
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
