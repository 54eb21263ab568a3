package server

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"errors"
	"io"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/storage/objects"
	"beamledger/storage/objects/objectstest"
)

// uploadStores are the object stores the resumable-upload tests run against.
var uploadStores = []struct {
	name string
	open func(t *testing.T) objects.Store
}{
	{"disk", func(t *testing.T) objects.Store {
		d, err := objects.NewDisk(t.TempDir())
		if err != nil {
			t.Fatal(err)
		}
		return d
	}},
	{"s3", func(t *testing.T) objects.Store { return objectstest.NewS3(t) }},
}

// tusWorld is a world whose server keeps its bytes in the store under test.
func tusWorld(t *testing.T, open func(t *testing.T) objects.Store) *world {
	w := newWorld(t)
	w.srv.objects = open(t)
	return w
}

// tus sends one tus request (with Tus-Resumable unless header sets it, even to
// ""), recording the exchange.
func (w *world) tus(method, path, token string, header http.Header, body []byte) response {
	w.t.Helper()
	var rd io.Reader
	if body != nil {
		rd = bytes.NewReader(body)
	}
	req, err := http.NewRequest(method, w.http.URL+path, rd)
	if err != nil {
		w.t.Fatal(err)
	}
	req.Header.Set("Tus-Resumable", tusVersion)
	if body != nil {
		req.Header.Set("Content-Type", tusOffsetStream)
	}
	for k, v := range header {
		req.Header[k] = v
	}
	if req.Header.Get("Tus-Resumable") == "" {
		req.Header.Del("Tus-Resumable")
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	return w.send(req, nil)
}

// tusMetadata encodes Upload-Metadata.
func tusMetadata(kv ...string) string {
	var pairs []string
	for i := 0; i+1 < len(kv); i += 2 {
		pairs = append(pairs, kv[i]+" "+base64.StdEncoding.EncodeToString([]byte(kv[i+1])))
	}
	return strings.Join(pairs, ",")
}

// createUpload begins an upload of length bytes and returns its path.
func (w *world) createUpload(token string, length int, kv ...string) (path string, r response) {
	w.t.Helper()
	r = w.tus(http.MethodPost, "/api/v1/uploads", token, http.Header{"Upload-Length": {strconv.Itoa(length)},
		"Upload-Metadata": {tusMetadata(kv...)}}, nil)
	if r.StatusCode != http.StatusCreated {
		w.t.Fatalf("create upload: %d %s", r.StatusCode, r.Body)
	}
	return r.Header.Get("Location"), r
}

// patch sends bytes at offset.
func (w *world) patch(path, token string, offset int, body []byte) response {
	w.t.Helper()
	return w.tus(http.MethodPatch, path, token, http.Header{"Upload-Offset": {strconv.Itoa(offset)}}, body)
}

// headOffset is the offset HEAD reports.
func (w *world) headOffset(path, token string) int {
	w.t.Helper()
	r := w.tus(http.MethodHead, path, token, nil, nil)
	if r.StatusCode != http.StatusOK || r.Header.Get("Cache-Control") != "no-store" {
		w.t.Fatalf("HEAD %s: %d %v", path, r.StatusCode, r.Header)
	}
	n, err := strconv.Atoi(r.Header.Get("Upload-Offset"))
	if err != nil {
		w.t.Fatalf("HEAD %s: Upload-Offset %q", path, r.Header.Get("Upload-Offset"))
	}
	return n
}

// sha256Hex is the hex SHA-256 of b.
func sha256Hex(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// patternBytes is n bytes that differ from part to part, so a part stored twice
// or out of order changes the digest.
func patternBytes(n int) []byte {
	b := make([]byte, n)
	for i := range b {
		b[i] = byte(i*31 + i>>11)
	}
	return b
}

// listKeys is every object key in the store under prefix.
func listKeys(t *testing.T, st objects.Store, prefix string) []string {
	t.Helper()
	var keys []string
	if err := st.List(t.Context(), prefix, func(i objects.Info) error { keys = append(keys, i.Key); return nil }); err != nil {
		t.Fatal(err)
	}
	return keys
}

// pendingMultiparts is the store's multipart uploads still open.
func pendingMultiparts(t *testing.T, st objects.Store) []objects.PendingUpload {
	t.Helper()
	var all []objects.PendingUpload
	for _, prefix := range []string{"incoming/", "sha256/"} {
		ps, err := st.ListMultipart(t.Context(), prefix)
		if err != nil {
			t.Fatal(err)
		}
		all = append(all, ps...)
	}
	return all
}

func TestUploadProtocol(t *testing.T) {
	for _, sc := range uploadStores {
		t.Run(sc.name, func(t *testing.T) {
			t.Parallel()
			w := tusWorld(t, sc.open)
			researcher := w.tokens[accounts.RoleResearcher]
			acq := testAcquisition(w)

			r := w.tus(http.MethodOptions, "/api/v1/uploads", "", http.Header{"Tus-Resumable": {""}}, nil)
			if r.StatusCode != http.StatusNoContent || r.Header.Get("Tus-Version") != tusVersion || r.Header.Get("Tus-Resumable") != tusVersion ||
				!strings.Contains(r.Header.Get("Tus-Extension"), "termination") || r.Header.Get("Tus-Max-Size") == "" {
				t.Errorf("OPTIONS: %d %v", r.StatusCode, r.Header)
			}
			r = w.tus(http.MethodPost, "/api/v1/uploads", researcher, http.Header{"Tus-Resumable": {""}, "Upload-Length": {"3"}}, nil)
			if r.StatusCode != http.StatusPreconditionFailed || r.Header.Get("Tus-Version") != tusVersion {
				t.Errorf("POST without Tus-Resumable: %d %v", r.StatusCode, r.Header)
			}

			// [published: FIPS 180-4 examples] one million "a", sent in odd-sized chunks
			// with no digest declared (the bytes gather under incoming/ and are moved).
			const millionA = "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"
			data := bytes.Repeat([]byte("a"), 1_000_000)
			path, created := w.createUpload(researcher, len(data), "filename", "a.txt", "acquisition_id", acq, "media_type", "text/plain")
			if created.Header.Get("Tus-Resumable") != tusVersion || created.Header.Get("Upload-Expires") == "" || created.Header.Get("Data-File-Id") == "" {
				t.Errorf("create: %v", created.Header)
			}
			fileID := created.Header.Get("Data-File-Id")
			var pending provenance.DataFile
			w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+fileID, researcher, nil, &pending)
			if pending.Status != provenance.FilePending {
				t.Errorf("file while uploading: %+v", pending)
			}
			off := 0
			for _, n := range []int{1, 4095, 333_333, 7, 0, 500_000, 162_564} {
				if n > 0 && off > 0 {
					if got := w.headOffset(path, researcher); got != off {
						t.Fatalf("HEAD offset %d, want %d", got, off)
					}
				}
				r := w.patch(path, researcher, off, data[off:off+n])
				off += n
				if r.StatusCode != http.StatusNoContent || r.Header.Get("Upload-Offset") != strconv.Itoa(off) {
					t.Fatalf("PATCH to %d: %d %v %s", off, r.StatusCode, r.Header, r.Body)
				}
				if off == len(data) {
					created = r
				}
			}
			if created.Header.Get("Data-File-Id") != fileID || created.Header.Get("Repr-Digest") != provenance.ReprDigest(millionA) {
				t.Errorf("completion headers %v", created.Header)
			}
			var f provenance.DataFile
			w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+fileID, researcher, nil, &f)
			if f.Status != provenance.FileStored || f.SHA256 != millionA || f.SizeBytes != 1_000_000 || f.MediaType != "text/plain" || f.FileName != "a.txt" {
				t.Errorf("stored file %+v", f)
			}
			if got := w.get("/api/v1/files/"+fileID+"/content", researcher, nil); !bytes.Equal(got.Body, data) {
				t.Errorf("content: %d bytes", len(got.Body))
			}
			if r := w.tus(http.MethodHead, path, researcher, nil, nil); r.StatusCode != http.StatusNotFound {
				t.Errorf("HEAD after completion: %d", r.StatusCode)
			}
			if keys := listKeys(t, w.srv.objects, ""); len(keys) != 1 || keys[0] != provenance.ObjectKey(millionA) {
				t.Errorf("objects after completion: %v", keys)
			}

			// Errors: a wrong offset, a foreign caller, a body past the length, a bad type.
			path, _ = w.createUpload(researcher, 10, "filename", "b.bin", "acquisition_id", acq)
			if r := w.patch(path, researcher, 3, []byte("abc")); r.StatusCode != http.StatusConflict {
				t.Errorf("PATCH at a wrong offset: %d %s", r.StatusCode, r.Body)
			}
			other := w.login(w.other.Email, testPassword).AccessToken
			for _, m := range []string{http.MethodHead, http.MethodDelete} {
				if r := w.tus(m, path, other, nil, nil); r.StatusCode != http.StatusNotFound {
					t.Errorf("%s of someone else's upload: %d", m, r.StatusCode)
				}
			}
			if r := w.patch(path, other, 0, []byte("abc")); r.StatusCode != http.StatusNotFound {
				t.Errorf("PATCH of someone else's upload: %d", r.StatusCode)
			}
			if r := w.patch(path, researcher, 0, make([]byte, 11)); r.StatusCode != http.StatusRequestEntityTooLarge {
				t.Errorf("PATCH past the length: %d %s", r.StatusCode, r.Body)
			}
			r = w.tus(http.MethodPatch, path, researcher, http.Header{"Upload-Offset": {"0"}, "Content-Type": {"application/octet-stream"}}, []byte("abc"))
			if r.StatusCode != http.StatusUnsupportedMediaType {
				t.Errorf("PATCH as octet-stream: %d", r.StatusCode)
			}
			if got := w.headOffset(path, w.tokens[accounts.RoleStaff]); got != 0 {
				t.Errorf("offset after refusals: %d", got)
			}
		})
	}
}

// TestUploadManyParts sends a file of several parts in chunks that straddle the
// part boundaries, with the digest declared, where parts are larger than a segment
// and so are assembled from segment objects.
func TestUploadManyParts(t *testing.T) {
	for _, sc := range uploadStores {
		t.Run(sc.name, func(t *testing.T) {
			t.Parallel()
			w := tusWorld(t, sc.open)
			// 5 MiB segments (S3's least part) and at most two parts: 3 segments a part.
			w.srv.uploads = uploadGeometry{segment: 5 << 20, maxParts: 2}
			agent := w.agent
			acq := testAcquisitionOn(w, w.instr.ID)
			data := patternBytes(22<<20 + 12345)
			sum := sha256Hex(data)
			path, created := w.createUpload(agent, len(data), "filename", "scan.raw", "acquisition_id", acq, "sha256", sum)
			off := 0
			for _, n := range []int{3 << 20, 9<<20 + 1, 3<<20 - 1, 7 << 20, len(data) - 22<<20} {
				if r := w.patch(path, agent, off, data[off:off+n]); r.StatusCode != http.StatusNoContent {
					t.Fatalf("PATCH at %d: %d %s", off, r.StatusCode, r.Body)
				}
				off += n
			}
			var f provenance.DataFile
			w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+created.Header.Get("Data-File-Id"), w.tokens[accounts.RoleStaff], nil, &f)
			if f.Status != provenance.FileStored || f.SHA256 != sum || f.SizeBytes != int64(len(data)) {
				t.Fatalf("stored %+v", f)
			}
			got := w.get("/api/v1/files/"+f.ID+"/content", w.tokens[accounts.RoleStaff], nil)
			if sha256Hex(got.Body) != sum {
				t.Errorf("content read back has another digest")
			}
			if keys := listKeys(t, w.srv.objects, ""); len(keys) != 1 {
				t.Errorf("objects left: %v", keys)
			}
			if ps := pendingMultiparts(t, w.srv.objects); len(ps) != 0 {
				t.Errorf("multipart uploads left: %v", ps)
			}

			// The same bytes again: the store has them, so they are only read and
			// checked, and the answer is the record already there.
			path, created = w.createUpload(agent, len(data), "filename", "again.raw", "acquisition_id", acq, "sha256", sum)
			if ps := pendingMultiparts(t, w.srv.objects); len(ps) != 0 {
				t.Errorf("a multipart upload was begun for bytes already stored: %v", ps)
			}
			r := w.patch(path, agent, 0, data)
			if r.StatusCode != http.StatusNoContent || r.Header.Get("Data-File-Id") != f.ID {
				t.Errorf("second upload of the same bytes: %d %v", r.StatusCode, r.Header)
			}
			if r := w.get("/api/v1/files/"+created.Header.Get("Data-File-Id"), w.tokens[accounts.RoleStaff], nil); r.StatusCode != http.StatusNotFound {
				t.Errorf("the second upload's pending record is still there: %d", r.StatusCode)
			}
		})
	}
}

// TestUploadDigestDeclaredOnPatch: a client that hashes while it sends declares
// the file's digest with Repr-Digest on a later PATCH. The right one stores the
// file; a wrong one leaves nothing behind; one that contradicts the digest declared
// at creation, or is not a sha-256 field, is refused before a byte is read.
func TestUploadDigestDeclaredOnPatch(t *testing.T) {
	w := tusWorld(t, uploadStores[0].open)
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	// [published: FIPS 180-4 examples] SHA-256("abc"), as RFC 9530 writes it.
	const abc = "sha-256=:ungWv48Bz+pBQUDeXa4iI7ADYaOWF3qctBD/YfIAFa0=:"
	digest := func(field string) http.Header {
		return http.Header{"Upload-Offset": {"1"}, "Repr-Digest": {field}}
	}

	path, created := w.createUpload(researcher, 3, "filename", "late.bin", "acquisition_id", acq)
	if r := w.patch(path, researcher, 0, []byte("a")); r.StatusCode != http.StatusNoContent {
		t.Fatalf("first PATCH: %d %s", r.StatusCode, r.Body)
	}
	if r := w.tus(http.MethodPatch, path, researcher, digest("sha-256=:not base64:"), []byte("bc")); r.StatusCode != http.StatusBadRequest || !fieldNamed(r, "Repr-Digest") {
		t.Errorf("a malformed Repr-Digest: %d %s", r.StatusCode, r.Body)
	}
	if r := w.tus(http.MethodPatch, path, researcher, digest("sha-512=:AAAA:"), []byte("bc")); r.StatusCode != http.StatusBadRequest || !fieldNamed(r, "Repr-Digest") {
		t.Errorf("a Repr-Digest without sha-256: %d %s", r.StatusCode, r.Body)
	}
	if got := w.headOffset(path, researcher); got != 1 {
		t.Errorf("offset after refused PATCHes: %d, want 1 (nothing read)", got)
	}
	r := w.tus(http.MethodPatch, path, researcher, digest(abc), []byte("bc"))
	if r.StatusCode != http.StatusNoContent || r.Header.Get("Data-File-Id") != created.Header.Get("Data-File-Id") || r.Header.Get("Repr-Digest") != abc {
		t.Fatalf("completing PATCH with the right digest: %d %v %s", r.StatusCode, r.Header, r.Body)
	}

	path, created = w.createUpload(researcher, 3, "filename", "wrong.bin", "acquisition_id", acq)
	if r := w.patch(path, researcher, 0, []byte("x")); r.StatusCode != http.StatusNoContent {
		t.Fatalf("first PATCH: %d %s", r.StatusCode, r.Body)
	}
	if r := w.tus(http.MethodPatch, path, researcher, digest(abc), []byte("bc")); r.StatusCode != http.StatusBadRequest || !fieldNamed(r, "Repr-Digest") {
		t.Fatalf("bytes that do not match the Repr-Digest: %d %s", r.StatusCode, r.Body)
	}
	if r := w.get("/api/v1/files/"+created.Header.Get("Data-File-Id"), researcher, nil); r.StatusCode != http.StatusNotFound {
		t.Errorf("record after a mismatch: %d", r.StatusCode)
	}

	path, _ = w.createUpload(researcher, 3, "filename", "both.bin", "acquisition_id", acq, "sha256", sha256Hex([]byte("abd")))
	if r := w.patch(path, researcher, 0, []byte("a")); r.StatusCode != http.StatusNoContent {
		t.Fatalf("first PATCH: %d %s", r.StatusCode, r.Body)
	}
	if r := w.tus(http.MethodPatch, path, researcher, digest(abc), []byte("bc")); r.StatusCode != http.StatusBadRequest || !contains(r.Body, "declared before") {
		t.Errorf("a Repr-Digest contradicting the creation's sha256: %d %s", r.StatusCode, r.Body)
	}
	if got := w.headOffset(path, researcher); got != 1 {
		t.Errorf("offset after a contradicting digest: %d, want 1", got)
	}
}

// TestUploadDeclaredDigestMismatch: bytes other than the declared ones leave no
// record, no object and no parts.
func TestUploadDeclaredDigestMismatch(t *testing.T) {
	for _, sc := range uploadStores {
		t.Run(sc.name, func(t *testing.T) {
			t.Parallel()
			w := tusWorld(t, sc.open)
			researcher := w.tokens[accounts.RoleResearcher]
			acq := testAcquisition(w)
			// [published: FIPS 180-4 examples] SHA-256("abc").
			path, created := w.createUpload(researcher, 3, "filename", "x.bin", "acquisition_id", acq,
				"sha256", "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad")
			r := w.patch(path, researcher, 0, []byte("abd"))
			if r.StatusCode != http.StatusBadRequest || !fieldNamed(r, "Upload-Metadata") || !contains(r.Body, "sha256") {
				t.Fatalf("mismatch: %d %s", r.StatusCode, r.Body)
			}
			if r := w.get("/api/v1/files/"+created.Header.Get("Data-File-Id"), researcher, nil); r.StatusCode != http.StatusNotFound {
				t.Errorf("record after a mismatch: %d %s", r.StatusCode, r.Body)
			}
			if keys := listKeys(t, w.srv.objects, ""); len(keys) != 0 {
				t.Errorf("objects after a mismatch: %v", keys)
			}
			if ps := pendingMultiparts(t, w.srv.objects); len(ps) != 0 {
				t.Errorf("multipart uploads after a mismatch: %v", ps)
			}
		})
	}
}

// TestUploadTermination: DELETE discards the parts and the pending record.
func TestUploadTermination(t *testing.T) {
	for _, sc := range uploadStores {
		t.Run(sc.name, func(t *testing.T) {
			t.Parallel()
			w := tusWorld(t, sc.open)
			researcher := w.tokens[accounts.RoleResearcher]
			acq := testAcquisition(w)
			data := patternBytes(9 << 20)
			path, created := w.createUpload(researcher, len(data)+5, "filename", "t.bin", "acquisition_id", acq)
			if r := w.patch(path, researcher, 0, data); r.StatusCode != http.StatusNoContent {
				t.Fatalf("PATCH: %d %s", r.StatusCode, r.Body)
			}
			if r := w.tus(http.MethodDelete, path, researcher, nil, nil); r.StatusCode != http.StatusNoContent {
				t.Fatalf("DELETE: %d %s", r.StatusCode, r.Body)
			}
			if r := w.tus(http.MethodHead, path, researcher, nil, nil); r.StatusCode != http.StatusNotFound {
				t.Errorf("HEAD after DELETE: %d", r.StatusCode)
			}
			if r := w.get("/api/v1/files/"+created.Header.Get("Data-File-Id"), researcher, nil); r.StatusCode != http.StatusNotFound {
				t.Errorf("record after DELETE: %d", r.StatusCode)
			}
			if keys := listKeys(t, w.srv.objects, ""); len(keys) != 0 {
				t.Errorf("objects after DELETE: %v", keys)
			}
			if ps := pendingMultiparts(t, w.srv.objects); len(ps) != 0 {
				t.Errorf("multipart uploads after DELETE: %v", ps)
			}
		})
	}
}

// failingBody gives n bytes of data and then fails, as a network failure would
// part-way through a request body.
type failingBody struct {
	data []byte
	n    int
}

var errNetworkDown = errors.New("network down")

func (b *failingBody) Read(p []byte) (int, error) {
	if b.n <= 0 {
		return 0, errNetworkDown
	}
	k := copy(p, b.data[:min(len(b.data), b.n, len(p))])
	b.data, b.n = b.data[k:], b.n-k
	return k, nil
}

// TestUploadInterrupted cuts a PATCH's connection part-way, once inside the first
// part and once past it: HEAD then reports a durable offset holding what arrived,
// and the resumed PATCH completes the file with the right digest.
func TestUploadInterrupted(t *testing.T) {
	for _, sc := range uploadStores {
		t.Run(sc.name, func(t *testing.T) {
			t.Parallel()
			w := tusWorld(t, sc.open)
			researcher := w.tokens[accounts.RoleResearcher]
			acq := testAcquisition(w)
			data := patternBytes(20<<20 + 3)
			path, created := w.createUpload(researcher, len(data), "filename", "cut.raw", "acquisition_id", acq)
			off := 0
			for _, cut := range []int{3<<20 + 17, 7 << 20} {
				req, err := http.NewRequest(http.MethodPatch, w.http.URL+path, &failingBody{data: data[off:], n: cut})
				if err != nil {
					t.Fatal(err)
				}
				req.ContentLength = int64(len(data) - off)
				req.Header.Set("Tus-Resumable", tusVersion)
				req.Header.Set("Content-Type", tusOffsetStream)
				req.Header.Set("Upload-Offset", strconv.Itoa(off))
				req.Header.Set("Authorization", "Bearer "+researcher)
				if res, err := w.http.Client().Do(req); err == nil {
					res.Body.Close()
					t.Fatalf("the cut PATCH was answered %d", res.StatusCode)
				}
				// The server notices the cut, stores what came and releases the lease.
				now := w.resumeOffset(path, researcher, off)
				if now <= off || now > off+cut {
					t.Fatalf("after a cut at %d: offset %d, want in (%d, %d]", off+cut, now, off, off+cut)
				}
				off = now
			}
			r := w.patch(path, researcher, off, data[off:])
			if r.StatusCode != http.StatusNoContent || r.Header.Get("Repr-Digest") != provenance.ReprDigest(sha256Hex(data)) {
				t.Fatalf("resumed PATCH: %d %v %s", r.StatusCode, r.Header, r.Body)
			}
			var f provenance.DataFile
			w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+created.Header.Get("Data-File-Id"), researcher, nil, &f)
			if f.SHA256 != sha256Hex(data) || f.SizeBytes != int64(len(data)) {
				t.Errorf("stored %+v", f)
			}
			if keys := listKeys(t, w.srv.objects, ""); len(keys) != 1 {
				t.Errorf("objects left: %v", keys)
			}
		})
	}
}

// resumeOffset waits until the upload's offset has moved past from and no request
// holds it (an empty PATCH at the offset is answered 204), and returns the offset.
func (w *world) resumeOffset(path, token string, from int) int {
	w.t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for time.Now().Before(deadline) {
		off := w.headOffset(path, token)
		if off > from {
			if r := w.patch(path, token, off, []byte{}); r.StatusCode == http.StatusNoContent {
				return off
			}
		}
		time.Sleep(50 * time.Millisecond)
	}
	w.t.Fatalf("the upload's offset stayed at %d", from)
	return 0
}

// TestUploadOneWriterAtATime: while a PATCH is running, another PATCH of the same
// upload is refused with 409, and the first finishes undisturbed.
func TestUploadOneWriterAtATime(t *testing.T) {
	w := tusWorld(t, uploadStores[0].open)
	// Four-byte parts, so the first PATCH's progress shows before its body ends.
	w.srv.uploads = uploadGeometry{segment: 4}
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	path, _ := w.createUpload(researcher, 6, "filename", "slow.bin", "acquisition_id", acq)
	pr, pw := io.Pipe()
	req, err := http.NewRequest(http.MethodPatch, w.http.URL+path, pr)
	if err != nil {
		t.Fatal(err)
	}
	req.ContentLength = 6
	req.Header.Set("Tus-Resumable", tusVersion)
	req.Header.Set("Content-Type", tusOffsetStream)
	req.Header.Set("Upload-Offset", "0")
	req.Header.Set("Authorization", "Bearer "+researcher)
	done := make(chan response, 1)
	go func() {
		res, err := w.http.Client().Do(req)
		if err != nil {
			done <- response{}
			return
		}
		defer res.Body.Close()
		done <- response{StatusCode: res.StatusCode, Header: res.Header}
	}()
	if _, err := pw.Write([]byte("abcd")); err != nil {
		t.Fatal(err)
	}
	// Once the first part is recorded, the first PATCH holds the upload and waits
	// for the rest of its body.
	for deadline := time.Now().Add(10 * time.Second); w.headOffset(path, researcher) != 4; time.Sleep(10 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatal("the first PATCH's first part never showed")
		}
	}
	if r := w.patch(path, researcher, 4, []byte{}); r.StatusCode != http.StatusConflict || !contains(r.Body, "another request") {
		t.Errorf("a second PATCH during the first: %d %s", r.StatusCode, r.Body)
	}
	if _, err := pw.Write([]byte("ef")); err != nil {
		t.Fatal(err)
	}
	pw.Close()
	if r := <-done; r.StatusCode != http.StatusNoContent || r.Header.Get("Repr-Digest") != provenance.ReprDigest(sha256Hex([]byte("abcdef"))) {
		t.Errorf("the first PATCH: %d %v", r.StatusCode, r.Header)
	}
}

// TestUploadCleanup: an upload idle past the expiry loses its parts, segments and
// pending record; multipart uploads and temporary objects no upload knows go too;
// a live upload is untouched.
func TestUploadCleanup(t *testing.T) {
	for _, sc := range uploadStores {
		t.Run(sc.name, func(t *testing.T) {
			t.Parallel()
			w := tusWorld(t, sc.open)
			ctx := context.Background()
			st := w.srv.objects
			researcher := w.tokens[accounts.RoleResearcher]
			acq := testAcquisition(w)
			data := patternBytes(9 << 20)
			old, created := w.createUpload(researcher, 20<<20, "filename", "old.raw", "acquisition_id", acq)
			if r := w.patch(old, researcher, 0, data); r.StatusCode != http.StatusNoContent {
				t.Fatalf("PATCH: %d %s", r.StatusCode, r.Body)
			}
			if ps := pendingMultiparts(t, st); len(ps) != 1 {
				t.Fatalf("multipart uploads before the cleanup: %v", ps)
			}
			orphanID, err := st.CreateMultipart(ctx, "incoming/orphan-of-a-crash")
			if err != nil {
				t.Fatal(err)
			}
			if _, err := st.Put(ctx, "incoming/left-by-a-crash", strings.NewReader("x"), 1, objects.PutOptions{}); err != nil {
				t.Fatal(err)
			}

			w.clock.Advance(w.srv.cfg.UploadExpiry + time.Hour)
			researcher = w.login(w.users[accounts.RoleResearcher].Email, testPassword).AccessToken
			live, _ := w.createUpload(researcher, 20, "filename", "live.raw", "acquisition_id", acq)
			if r := w.patch(live, researcher, 0, []byte("0123456789")); r.StatusCode != http.StatusNoContent {
				t.Fatalf("PATCH: %d %s", r.StatusCode, r.Body)
			}
			rep, ran, err := w.srv.CleanupUploads(ctx)
			if err != nil || !ran {
				t.Fatalf("cleanup: %v %v", ran, err)
			}
			if rep.Uploads != 1 || rep.Multiparts != 1 || rep.Objects != 1 {
				t.Errorf("cleanup report %+v, want 1 upload, 1 multipart, 1 object", rep)
			}
			ps := pendingMultiparts(t, st)
			if len(ps) != 1 || ps[0].UploadID == orphanID || !strings.HasPrefix(ps[0].Key, "incoming/") {
				t.Errorf("multipart uploads after the cleanup: %v (only the live upload's should be left)", ps)
			}
			if r := w.tus(http.MethodHead, old, researcher, nil, nil); r.StatusCode != http.StatusNotFound {
				t.Errorf("HEAD of the expired upload: %d", r.StatusCode)
			}
			if r := w.get("/api/v1/files/"+created.Header.Get("Data-File-Id"), researcher, nil); r.StatusCode != http.StatusNotFound {
				t.Errorf("the expired upload's record: %d", r.StatusCode)
			}
			liveID := strings.TrimPrefix(live, "/api/v1/uploads/")
			if keys := listKeys(t, st, ""); len(keys) != 1 || keys[0] != provenance.UploadSegmentKey(liveID, 0) {
				t.Errorf("objects after the cleanup: %v (only the live upload's segment should be left)", keys)
			}
			if got := w.headOffset(live, researcher); got != 10 {
				t.Errorf("live upload offset %d", got)
			}
		})
	}
}

// testAcquisitionOn is testAcquisition on a given instrument (the agent's own, for
// agent uploads).
func testAcquisitionOn(w *world, instrumentID string) string {
	w.t.Helper()
	booking, start := w.pastBooking(instrumentID, w.own.ID, w.users[accounts.RoleResearcher].ID)
	var a provenance.Acquisition
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions", w.tokens[accounts.RoleResearcher], map[string]any{
		"booking_id": booking, "started_at": start.Add(time.Hour), "ended_at": start.Add(2 * time.Hour),
		"conditions": map[string]any{"accelerating_voltage": "300 kV"}}, &a)
	return a.ID
}

// exerciseUploads covers the resumable-upload routes for the document check: every
// success and an error of each.
func exerciseUploads(t *testing.T, w *world) {
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	if r := w.tus(http.MethodOptions, "/api/v1/uploads", "", nil, nil); r.StatusCode != http.StatusNoContent {
		t.Errorf("OPTIONS: %d", r.StatusCode)
	}
	for _, h := range []http.Header{
		{"Upload-Length": {"3"}, "Upload-Metadata": {tusMetadata("acquisition_id", acq)}},
		{"Upload-Length": {"3"}, "Tus-Resumable": {"0.2.2"}},
		{"Upload-Length": {strconv.FormatInt(w.srv.cfg.MaxFileBytes+1, 10)}, "Upload-Metadata": {tusMetadata("filename", "big.raw", "acquisition_id", acq)}},
	} {
		if r := w.tus(http.MethodPost, "/api/v1/uploads", researcher, h, nil); r.StatusCode < 400 {
			t.Errorf("POST with %v: %d", h, r.StatusCode)
		}
	}
	path, _ := w.createUpload(researcher, 6, "filename", "e.txt", "acquisition_id", acq, "sha256", sha256Hex([]byte("abcdef")))
	w.headOffset(path, researcher)
	if r := w.tus(http.MethodHead, "/api/v1/uploads/"+acq, researcher, nil, nil); r.StatusCode != http.StatusNotFound {
		t.Errorf("HEAD of no upload: %d", r.StatusCode)
	}
	if r := w.patch(path, researcher, 0, []byte("abc")); r.StatusCode != http.StatusNoContent {
		t.Errorf("PATCH: %d %s", r.StatusCode, r.Body)
	}
	if r := w.patch(path, researcher, 0, []byte("abc")); r.StatusCode != http.StatusConflict {
		t.Errorf("PATCH at a stale offset: %d", r.StatusCode)
	}
	if r := w.patch(path, researcher, 3, []byte("def")); r.StatusCode != http.StatusNoContent || r.Header.Get("Data-File-Id") == "" {
		t.Errorf("last PATCH: %d %v", r.StatusCode, r.Header)
	}
	// The digest declared on the PATCH that completes the file.
	path, _ = w.createUpload(researcher, 3, "filename", "g.txt", "acquisition_id", acq)
	if r := w.tus(http.MethodPatch, path, researcher, http.Header{"Upload-Offset": {"0"}, "Repr-Digest": {"sha-256=:x:"}}, []byte("ghi")); r.StatusCode != http.StatusBadRequest {
		t.Errorf("PATCH with a malformed Repr-Digest: %d", r.StatusCode)
	}
	if r := w.tus(http.MethodPatch, path, researcher, http.Header{"Upload-Offset": {"0"}, "Repr-Digest": {provenance.ReprDigest(sha256Hex([]byte("ghi")))}}, []byte("ghi")); r.StatusCode != http.StatusNoContent || r.Header.Get("Data-File-Id") == "" {
		t.Errorf("PATCH with its Repr-Digest: %d %v", r.StatusCode, r.Header)
	}
	path, _ = w.createUpload(researcher, 6, "filename", "f.txt", "acquisition_id", acq)
	if r := w.tus(http.MethodDelete, path, researcher, nil, nil); r.StatusCode != http.StatusNoContent {
		t.Errorf("DELETE: %d", r.StatusCode)
	}
	if r := w.tus(http.MethodDelete, path, researcher, nil, nil); r.StatusCode != http.StatusNotFound {
		t.Errorf("DELETE again: %d", r.StatusCode)
	}
}

// partGate is the store under test with two part uploads held back: part hold
// waits (up to a few seconds) until part hold+1 has begun, and fail, once its next
// has begun too, fails once. It notes which held parts saw their next begin.
type partGate struct {
	objects.Store
	hold, fail int
	mu         sync.Mutex
	begun      map[int]chan struct{}
	overlapped map[int]bool
	failed     bool
}

func (g *partGate) begin(n int) chan struct{} {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.begun[n] == nil {
		g.begun[n] = make(chan struct{})
	}
	return g.begun[n]
}

func (g *partGate) PutPart(ctx context.Context, key, uploadID string, n int, r io.Reader, size int64) (objects.Part, error) {
	ch := g.begin(n)
	g.mu.Lock()
	select {
	case <-ch:
	default:
		close(ch)
	}
	g.mu.Unlock()
	if n == g.hold || n == g.fail {
		select {
		case <-g.begin(n + 1):
			g.mu.Lock()
			g.overlapped[n] = true
			g.mu.Unlock()
		case <-time.After(3 * time.Second):
		}
	}
	g.mu.Lock()
	fail := n == g.fail && !g.failed
	g.failed = g.failed || fail
	g.mu.Unlock()
	if fail {
		return objects.Part{}, errors.New("part refused by the test")
	}
	return g.Store.PutPart(ctx, key, uploadID, n, r, size)
}

// TestUploadPartsInFlight: one PATCH sends the next whole part while the one before
// is still going up, yet records progress strictly in order. Part 1 finishes only
// after part 2 has begun, and part 4 fails after part 5 has begun: the upload stays
// at the end of part 3 (part 5's bytes, stored but after a failure, are not
// counted), and a PATCH from there completes the file with the right digest and
// nothing left over.
func TestUploadPartsInFlight(t *testing.T) {
	for _, sc := range uploadStores {
		t.Run(sc.name, func(t *testing.T) {
			t.Parallel()
			gate := &partGate{Store: sc.open(t), hold: 1, fail: 4, begun: map[int]chan struct{}{}, overlapped: map[int]bool{}}
			w := tusWorld(t, func(*testing.T) objects.Store { return gate })
			const part = 5 << 20 // one segment a part
			w.srv.uploads = uploadGeometry{segment: part}
			agent := w.agent
			data := patternBytes(5*part + 777)
			sum := sha256Hex(data)
			path, created := w.createUpload(agent, len(data), "filename", "stack.raw", "acquisition_id", testAcquisitionOn(w, w.instr.ID), "sha256", sum)

			req, err := http.NewRequest(http.MethodPatch, w.http.URL+path, bytes.NewReader(data))
			if err != nil {
				t.Fatal(err)
			}
			req.Header.Set("Tus-Resumable", tusVersion)
			req.Header.Set("Content-Type", tusOffsetStream)
			req.Header.Set("Upload-Offset", "0")
			req.Header.Set("Authorization", "Bearer "+agent)
			if res, err := w.http.Client().Do(req); err == nil {
				res.Body.Close()
				if res.StatusCode < 500 {
					t.Fatalf("the PATCH whose part 4 failed was answered %d", res.StatusCode)
				}
			}
			if got := w.resumeOffset(path, agent, 0); got != 3*part {
				t.Fatalf("offset after part 4 failed: %d, want %d (three parts)", got, 3*part)
			}
			if !gate.overlapped[1] || !gate.overlapped[4] {
				t.Errorf("parts 1 and 4 should each have been in flight with the part after them: %v", gate.overlapped)
			}

			r := w.patch(path, agent, 3*part, data[3*part:])
			if r.StatusCode != http.StatusNoContent || r.Header.Get("Data-File-Id") != created.Header.Get("Data-File-Id") {
				t.Fatalf("resumed PATCH: %d %v %s", r.StatusCode, r.Header, r.Body)
			}
			got := w.get("/api/v1/files/"+r.Header.Get("Data-File-Id")+"/content", w.tokens[accounts.RoleStaff], nil)
			if sha256Hex(got.Body) != sum || len(got.Body) != len(data) {
				t.Errorf("content read back: %d bytes, another digest", len(got.Body))
			}
			if keys := listKeys(t, gate.Store, ""); len(keys) != 1 {
				t.Errorf("objects left: %v", keys)
			}
			if ps := pendingMultiparts(t, gate.Store); len(ps) != 0 {
				t.Errorf("multipart uploads left: %v", ps)
			}
		})
	}
}
