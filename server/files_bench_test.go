package server

import (
	"bufio"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"encoding/json"
	"io"
	"net/http"
	"os"
	"strconv"
	"strings"
	"sync/atomic"
	"testing"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/objects/objectstest"
)

// The data-file benchmarks run under `make bench SUITES=files`, beside the anchors in
// storage/objects (BenchmarkRawPutObject), against the harness's S3 server:
//
//	go run ./deploy/testenv -- go test -run '^$' -bench 'RawPutObject|FileUpload|UploadCommand|Scrub' -benchtime 1x ./storage/objects/ ./server/ ./cmd/beamledger/
//
// BenchmarkFileUpload uploads through the HTTP endpoint with the digest declared
// (as `beamledger upload` does), and reports the server's peak resident memory
// growth while uploading 1 GiB and 4 GiB. BenchmarkScrub compares a plain SHA-256
// pass over a stored object read from the store with `beamledger scrub`'s work.
func BenchmarkFileUpload(b *testing.B) {
	w := newWorld(b)
	w.srv.objects = objectstest.NewS3(b)
	acq := testAcquisition(w)
	token := w.tokens[accounts.RoleResearcher]
	b.Run("endpoint-2GiB", func(b *testing.B) {
		run := nextFileBenchRun()
		b.SetBytes(objectstest.BenchObjectBytes)
		for i := 0; i < b.N; i++ {
			b.StopTimer()
			digest := patternDigest(objectstest.BenchObjectBytes, run+100+i)
			b.StartTimer()
			objectstest.Settle(b)
			f := benchUpload(b, w, acq, token, objectstest.BenchObjectBytes, run+100+i, digest)
			dropObject(b, w, f)
		}
	})
	for _, size := range []int64{1 << 30, 4 << 30} {
		b.Run("rss-"+strconv.FormatInt(size>>30, 10)+"GiB", func(b *testing.B) {
			run := nextFileBenchRun()
			b.SetBytes(size)
			for i := 0; i < b.N; i++ {
				b.StopTimer()
				shift := run + int(size>>30)*1000 + i
				digest := patternDigest(size, shift)
				before := resetPeakRSS(b)
				b.StartTimer()
				objectstest.Settle(b)
				f := benchUpload(b, w, acq, token, size, shift, digest)
				b.ReportMetric(float64(peakRSS(b)-before)/(1<<20), "rss-growth-MiB")
				dropObject(b, w, f)
			}
		})
	}
}

// dropObject deletes an uploaded file's object with the timer stopped, so that the
// store holds no more from one run to the next than the anchor's does (its bucket
// holds one object).
func dropObject(b *testing.B, w *world, f provenance.DataFile) {
	b.StopTimer()
	if err := w.srv.objects.Delete(context.Background(), f.ObjectKey); err != nil {
		b.Fatal(err)
	}
	b.StartTimer()
}

// fileBenchRuns counts the runs of BenchmarkFileUpload's sub-benchmarks in this
// process: go test -count runs each again in the same world, and each run sends
// bytes of its own, since the same bytes again would only be checked and linked to
// the record the run before left.
var fileBenchRuns atomic.Int64

// nextFileBenchRun offsets the pattern shifts of one sub-benchmark run.
func nextFileBenchRun() int { return int(fileBenchRuns.Add(1)) * 100_000 }

// BenchmarkScrub reads one stored 2 GiB object back: "plain" hashes the bytes the
// store returns and nothing else, the anchor; "scrub" is the scrub of that object.
func BenchmarkScrub(b *testing.B) {
	w := newWorld(b)
	w.srv.objects = objectstest.NewS3(b)
	acq := testAcquisition(w)
	f := benchUpload(b, w, acq, w.tokens[accounts.RoleResearcher], objectstest.BenchObjectBytes, 7, patternDigest(objectstest.BenchObjectBytes, 7))
	ctx := context.Background()
	b.Run("plain-sha256", func(b *testing.B) {
		b.SetBytes(f.SizeBytes)
		buf := make([]byte, scrubBuffer)
		for i := 0; i < b.N; i++ {
			r, err := w.srv.objects.Open(ctx, f.ObjectKey, 0, -1)
			if err != nil {
				b.Fatal(err)
			}
			h := sha256.New()
			if _, err := io.CopyBuffer(h, r, buf); err != nil {
				b.Fatal(err)
			}
			r.Close()
		}
	})
	b.Run("scrub", func(b *testing.B) {
		b.SetBytes(f.SizeBytes)
		for i := 0; i < b.N; i++ {
			rep, err := Scrub(ctx, w.db, w.srv.objects, ScrubOptions{})
			if err != nil || rep.Checked != 1 || len(rep.Findings) != 0 {
				b.Fatalf("scrub: %+v %v", rep, err)
			}
		}
	})
}

// patternDigest is the Repr-Digest of the pattern's bytes, computed by reading them.
func patternDigest(size int64, shift int) string {
	h := sha256.New()
	_, _ = io.Copy(h, objectstest.NewPattern(size, shift))
	return "sha-256=:" + base64.StdEncoding.EncodeToString(h.Sum(nil)) + ":"
}

// benchUpload streams size pattern bytes to the upload endpoint with their digest.
func benchUpload(b *testing.B, w *world, acq, token string, size int64, shift int, digest string) provenance.DataFile {
	req, err := http.NewRequest(http.MethodPost, w.http.URL+"/api/v1/files?acquisition_id="+acq+"&name=bench-"+strconv.Itoa(shift)+".raw",
		objectstest.NewPattern(size, shift))
	if err != nil {
		b.Fatal(err)
	}
	req.ContentLength = size
	req.Header.Set("Authorization", "Bearer "+token)
	req.Header.Set("Content-Type", "application/octet-stream")
	req.Header.Set("Repr-Digest", digest)
	res, err := w.http.Client().Do(req)
	if err != nil {
		b.Fatal(err)
	}
	defer res.Body.Close()
	body, _ := io.ReadAll(res.Body)
	if res.StatusCode != http.StatusCreated {
		b.Fatalf("upload: %d %s", res.StatusCode, body)
	}
	var f provenance.DataFile
	if err := json.Unmarshal(body, &f); err != nil {
		b.Fatal(err)
	}
	return f
}

// resetPeakRSS clears the process's peak resident size (Linux: 5 > clear_refs) and
// returns the current resident size in bytes.
func resetPeakRSS(b *testing.B) int64 {
	if err := os.WriteFile("/proc/self/clear_refs", []byte("5"), 0); err != nil {
		b.Skipf("cannot reset the peak RSS here: %v", err)
	}
	return procStatus(b, "VmRSS:")
}

// peakRSS is the process's peak resident size in bytes since the last reset.
func peakRSS(b *testing.B) int64 { return procStatus(b, "VmHWM:") }

func procStatus(b *testing.B, field string) int64 {
	f, err := os.Open("/proc/self/status")
	if err != nil {
		b.Skipf("no /proc/self/status: %v", err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		if rest, ok := strings.CutPrefix(sc.Text(), field); ok {
			kb, _ := strconv.ParseInt(strings.TrimSuffix(strings.TrimSpace(rest), " kB"), 10, 64)
			return kb << 10
		}
	}
	b.Fatalf("%s not in /proc/self/status", field)
	return 0
}
