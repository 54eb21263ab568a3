package main

import (
	"bufio"
	"context"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"beamledger/server"
	"beamledger/storage/objects/objectstest"
)

// BenchmarkUploadCommand sends a 2 GiB file with `beamledger upload` (hashing it
// first, since its digest names the object, then sending it with the digest
// declared) to a server in this process over the harness's S3 server. Run it
// with the other data-file benchmarks (`make bench SUITES=files`) and compare
// its MB/s with BenchmarkRawPutObject; the time includes the command's own
// reading and hashing of the file.
func BenchmarkUploadCommand(b *testing.B) {
	s3 := objectstest.Config(b)
	objectstest.Open(b, s3) // the bucket, emptied afterwards
	f := newUploadFacility(b, func(c *server.Config) {
		c.ObjectStore = "s3"
		c.S3 = server.S3Config{Endpoint: s3.Endpoint, Region: s3.Region, Bucket: s3.Bucket, AccessKey: s3.AccessKey,
			SecretKey: s3.SecretKey, PathStyle: true}
	})
	path := filepath.Join(b.TempDir(), "scan.raw")
	file, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	w := bufio.NewWriterSize(file, 1<<20)
	if _, err := io.Copy(w, objectstest.NewPattern(objectstest.BenchObjectBytes, 5)); err != nil {
		b.Fatal(err)
	}
	if err := w.Flush(); err != nil {
		b.Fatal(err)
	}
	file.Close()
	o := f.options(b, f.url)
	o.chunkBytes = 0 // the command's default: no limit per request
	b.SetBytes(objectstest.BenchObjectBytes)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		objectstest.Settle(b)
		var out strings.Builder
		if err := runUploads(context.Background(), o, []string{path}, &out, io.Discard); err != nil {
			b.Fatal(err)
		}
		if !strings.Contains(out.String(), "scan.raw") {
			b.Fatalf("upload printed %q", out.String())
		}
	}
}
