package objects_test

import (
	"context"
	"testing"

	"github.com/minio/minio-go/v7"
	"github.com/minio/minio-go/v7/pkg/credentials"

	"beamledger/storage/objects/objectstest"
)

// BenchmarkRawPutObject is the anchor of the upload benchmark: minio-go's PutObject
// of a 2 GiB object of known size from an in-memory pattern, straight to the
// harness's S3 server. `make bench` runs it in the same harness as server's
// BenchmarkFileUpload; compare their MB/s.
//
// default is PutObject with its default options, the anchor the targets are
// set against. Without TLS those sign every 64 KiB of the payload, hashing it
// with SHA-256 on both sides. store-options is PutObject as the S3 store calls
// it (unsigned payload, a CRC32C per part), to show what of the difference is
// the options and what the server.
func BenchmarkRawPutObject(b *testing.B) {
	cfg := objectstest.Config(b)
	objectstest.Open(b, cfg) // makes the bucket and empties it afterwards
	for _, c := range []struct {
		name string
		opts minio.PutObjectOptions
	}{
		{"default", minio.PutObjectOptions{}},
		{"store-options", minio.PutObjectOptions{DisableContentSha256: true, Checksum: minio.ChecksumCRC32C}},
	} {
		b.Run(c.name, func(b *testing.B) {
			client, err := minio.New(cfg.Endpoint, &minio.Options{Creds: credentials.NewStaticV4(cfg.AccessKey, cfg.SecretKey, ""),
				Region: cfg.Region, BucketLookup: minio.BucketLookupPath, TrailingHeaders: c.opts.Checksum.IsSet()})
			if err != nil {
				b.Fatal(err)
			}
			b.SetBytes(objectstest.BenchObjectBytes)
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				objectstest.Settle(b)
				r := objectstest.NewPattern(objectstest.BenchObjectBytes, i)
				if _, err := client.PutObject(context.Background(), cfg.Bucket, "bench/raw", r, objectstest.BenchObjectBytes, c.opts); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
