package objects_test

import (
	"context"
	"testing"

	"github.com/minio/minio-go/v7"
	"github.com/minio/minio-go/v7/pkg/credentials"

	"beamledger/storage/objects/objectstest"
)

// BenchmarkRawPutObject is the anchor of the upload benchmark: minio-go's PutObject
// with its default options, straight to the harness's S3 server, of a 2 GiB object
// of known size from an in-memory pattern. `make bench-files` runs it in the same
// harness as server's BenchmarkFileUpload; compare their MB/s.
func BenchmarkRawPutObject(b *testing.B) {
	cfg := objectstest.Config(b)
	objectstest.Open(b, cfg) // makes the bucket and empties it afterwards
	client, err := minio.New(cfg.Endpoint, &minio.Options{Creds: credentials.NewStaticV4(cfg.AccessKey, cfg.SecretKey, ""),
		Region: cfg.Region, BucketLookup: minio.BucketLookupPath})
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(objectstest.BenchObjectBytes)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		objectstest.Settle(b)
		r := objectstest.NewPattern(objectstest.BenchObjectBytes, i)
		if _, err := client.PutObject(context.Background(), cfg.Bucket, "bench/raw", r, objectstest.BenchObjectBytes, minio.PutObjectOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}
