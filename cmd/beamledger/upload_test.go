package main

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/http/httptest"
	"net/http/httputil"
	"net/url"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/server"
	"beamledger/storage/objects"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

const uploadTestPassword = "a long test passphrase for uploads"

// uploadFacility is a server in this process over a fresh database, with one
// researcher and their project.
type uploadFacility struct {
	url, token, projectID string
	db                    *postgres.DB
	cfg                   server.Config
}

func newUploadFacility(t testing.TB, configure ...func(*server.Config)) *uploadFacility {
	t.Helper()
	db := pgtest.Open(t)
	_, key, err := ed25519.GenerateKey(nil)
	if err != nil {
		t.Fatal(err)
	}
	cfg := server.Defaults()
	cfg.DatabaseURL, cfg.SigningKey, cfg.ObjectDir = "postgres://unused", key, t.TempDir()
	for _, c := range configure {
		c(&cfg)
	}
	srv, err := server.New(cfg, db, slog.New(slog.NewTextHandler(io.Discard, nil)), time.Now)
	if err != nil {
		t.Fatal(err)
	}
	hs := httptest.NewServer(srv.Handler())
	t.Cleanup(hs.Close)
	f := &uploadFacility{url: hs.URL, db: db, cfg: cfg}
	f.projectID, f.token = researcherWithProject(t, db, hs.URL)
	return f
}

// researcherWithProject makes a researcher with a project of their own and signs
// them in at base.
func researcherWithProject(t testing.TB, db *postgres.DB, base string) (projectID, token string) {
	t.Helper()
	ctx := context.Background()
	hash, err := accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), 1).Hash(ctx, uploadTestPassword)
	if err != nil {
		t.Fatal(err)
	}
	u, err := db.CreateUser(ctx, accounts.NewUser{Email: "ri@test.example", DisplayName: "Ri", Role: accounts.RoleResearcher}, hash)
	if err != nil {
		t.Fatal(err)
	}
	p, err := db.CreateProject(ctx, accounts.NewProject{Code: "UP-1", Title: "Uploads", PrincipalInvestigatorID: u.ID, RateClass: accounts.RateClass("internal")})
	if err != nil {
		t.Fatal(err)
	}
	return p.ID, login(t, base, "ri@test.example", uploadTestPassword)
}

// objectKeys lists the objects in the facility's local-disk store.
func (f *uploadFacility) objectKeys(t *testing.T) []string {
	t.Helper()
	store, err := objects.NewDisk(f.cfg.ObjectDir)
	if err != nil {
		t.Fatal(err)
	}
	var keys []string
	if err := store.List(context.Background(), "", func(i objects.Info) error { keys = append(keys, i.Key); return nil }); err != nil {
		t.Fatal(err)
	}
	return keys
}

// fileRecord is the server's record of a data file.
type fileRecord struct {
	ID        string `json:"id"`
	SHA256    string `json:"sha256"`
	SizeBytes int64  `json:"size_bytes"`
	Status    string `json:"status"`
	FileName  string `json:"file_name"`
}

func (f *uploadFacility) record(t *testing.T, id string) fileRecord {
	t.Helper()
	var r fileRecord
	getJSON(t, f.url+"/api/v1/files/"+id, f.token, &r)
	return r
}

func (f *uploadFacility) options(t testing.TB, base string) uploadOptions {
	return uploadOptions{server: base, token: f.token, project: f.projectID, statePath: filepath.Join(t.TempDir(), "uploads.json"),
		chunkBytes: 4 << 20, retries: 5, backoff: 10 * time.Millisecond, progressEvery: time.Hour, client: &http.Client{}}
}

func testPattern(n int) []byte {
	b := make([]byte, n)
	for i := range b {
		b[i] = byte(i*13 + i>>9)
	}
	return b
}

func hexSum(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// TestUploadCommandFolder uploads a folder of two files through the command line
// and checks the lines printed against the records stored.
func TestUploadCommandFolder(t *testing.T) {
	f := newUploadFacility(t)
	dir := t.TempDir()
	big := testPattern(11<<20 + 5)
	files := map[string][]byte{filepath.Join(dir, "abc.txt"): []byte("abc"), filepath.Join(dir, "scans", "frame-0001.raw"): big}
	for p, b := range files {
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	t.Setenv("BEAMLEDGER_TOKEN", f.token)
	var out, errOut bytes.Buffer
	err := run(context.Background(), []string{"upload", "-server", f.url, "-project", f.projectID, "-chunk-bytes", "3000000",
		"-state", filepath.Join(t.TempDir(), "state.json"), dir}, &out, &errOut)
	if err != nil {
		t.Fatalf("upload: %v\n%s", err, errOut.String())
	}
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	if len(lines) != 2 {
		t.Fatalf("printed %q", out.String())
	}
	for _, line := range lines {
		fields := strings.Split(line, "  ")
		if len(fields) != 3 {
			t.Fatalf("line %q", line)
		}
		want := files[fields[2]]
		rec := f.record(t, fields[1])
		// [published: FIPS 180-4 examples] "abc" → ba7816bf…; the other is checked against Go's own.
		if fields[0] != hexSum(want) || rec.SHA256 != fields[0] || rec.Status != "stored" || rec.SizeBytes != int64(len(want)) || rec.FileName != filepath.Base(fields[2]) {
			t.Errorf("line %q: record %+v", line, rec)
		}
	}
	if !strings.Contains(out.String(), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad  ") {
		t.Errorf("abc.txt's digest is not the published one: %s", out.String())
	}
	if !strings.Contains(errOut.String(), "MiB/s") || !strings.Contains(errOut.String(), "left") {
		t.Errorf("no progress with rate and time left on stderr: %q", errOut.String())
	}
}

// cutProxy passes TCP connections to target and cuts the client's side once the
// bytes sent upstream pass cutAt (negative: never), the way a network failure
// would. With once set it cuts one time and then passes everything.
type cutProxy struct {
	ln     net.Listener
	target string
	mu     sync.Mutex
	sent   int64
	cutAt  int64
	once   bool
	cuts   int
}

func newCutProxy(t *testing.T, target string, cutAt int64, once bool) *cutProxy {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	p := &cutProxy{ln: ln, target: strings.TrimPrefix(target, "http://"), cutAt: cutAt, once: once}
	t.Cleanup(func() { ln.Close() })
	go p.serve()
	return p
}

func (p *cutProxy) url() string { return "http://" + p.ln.Addr().String() }

func (p *cutProxy) serve() {
	for {
		c, err := p.ln.Accept()
		if err != nil {
			return
		}
		go p.pass(c)
	}
}

func (p *cutProxy) pass(c net.Conn) {
	up, err := net.Dial("tcp", p.target)
	if err != nil {
		c.Close()
		return
	}
	defer c.Close()
	defer up.Close()
	go func() { _, _ = io.Copy(c, up); c.Close() }()
	buf := make([]byte, 32<<10)
	for {
		n, err := c.Read(buf)
		if n > 0 {
			p.mu.Lock()
			cut := p.cutAt >= 0 && p.sent+int64(n) > p.cutAt
			keep := int64(n)
			if cut {
				keep = max(0, p.cutAt-p.sent)
				p.cuts++
				if p.once {
					p.cutAt = -1
				} else {
					p.cutAt = p.sent + keep // every later byte is cut too
				}
			}
			p.sent += keep
			p.mu.Unlock()
			if _, werr := up.Write(buf[:keep]); werr != nil || cut {
				return
			}
		}
		if err != nil {
			return
		}
	}
}

func (p *cutProxy) setCut(at int64, once bool) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.cutAt, p.once = at, once
}

// TestUploadCommandResumes: a connection cut part-way is waited out and the upload
// resumed from the server's offset; and a run that gave up resumes, on the next
// run, the same upload instead of beginning again.
func TestUploadCommandResumes(t *testing.T) {
	f := newUploadFacility(t)
	data := testPattern(10<<20 + 77)
	path := filepath.Join(t.TempDir(), "stack.tif")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	proxy := newCutProxy(t, f.url, 6<<20, true)
	o := f.options(t, proxy.url())
	var out, errOut bytes.Buffer
	if err := runUploads(context.Background(), o, []string{path}, &out, &errOut); err != nil {
		t.Fatalf("upload through a cut: %v\n%s", err, errOut.String())
	}
	id := strings.Fields(out.String())[1]
	if rec := f.record(t, id); rec.SHA256 != hexSum(data) || proxy.cuts != 1 || !strings.Contains(errOut.String(), "resuming") {
		t.Errorf("record %+v after %d cuts; stderr %q", rec, proxy.cuts, errOut.String())
	}

	// A run that gives up at the first failure (as a crash would end it) ...
	other := testPattern(9 << 20)
	other[0] = 1
	path2 := filepath.Join(t.TempDir(), "second.tif")
	if err := os.WriteFile(path2, other, 0o644); err != nil {
		t.Fatal(err)
	}
	proxy.cutFromNow(5 << 20)
	o.retries = 0
	out.Reset()
	if err := runUploads(context.Background(), o, []string{path2}, &out, &errOut); err == nil {
		t.Fatal("the run through a dead network succeeded")
	}
	var state map[string]string
	b, _ := os.ReadFile(o.statePath)
	if err := json.Unmarshal(b, &state); err != nil || len(state) != 1 {
		t.Fatalf("state after the failed run: %s %v", b, err)
	}
	var pending struct {
		Items []fileRecord `json:"items"`
	}
	getJSON(t, f.url+"/api/v1/files?project_id="+f.projectID, f.token, &pending)
	var pendingID string
	for _, r := range pending.Items {
		if r.Status == "pending" {
			pendingID = r.ID
		}
	}
	// ... and the next run picks the same upload up: the record is the pending one.
	proxy.setCut(-1, false)
	o.retries = 5
	if err := runUploads(context.Background(), o, []string{path2}, &out, &errOut); err != nil {
		t.Fatalf("second run: %v\n%s", err, errOut.String())
	}
	if got := strings.Fields(out.String()); len(got) != 3 || got[1] != pendingID || pendingID == "" || got[0] != hexSum(other) {
		t.Errorf("second run printed %q; the pending record was %s", out.String(), pendingID)
	}
	if b, _ := os.ReadFile(o.statePath); strings.Contains(string(b), "uploads/") {
		t.Errorf("state still names the finished upload: %s", b)
	}
}

// cutFromNow cuts every connection once n more bytes have gone upstream.
func (p *cutProxy) cutFromNow(n int64) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.cutAt, p.once = p.sent+n, false
}

// requestLog is a proxy in front of the facility's server that notes each
// request's method, length, Repr-Digest and whether Upload-Metadata declares a
// sha256.
func requestLog(t *testing.T, f *uploadFacility) (proxyURL string, seen func() []string) {
	target, _ := url.Parse(f.url)
	var mu sync.Mutex
	var log []string
	proxy := httptest.NewServer(&httputil.ReverseProxy{Rewrite: func(r *httputil.ProxyRequest) {
		r.SetURL(target)
		mu.Lock()
		log = append(log, fmt.Sprintf("%s len=%d digest=%q meta-sha=%t", r.In.Method, r.In.ContentLength,
			r.In.Header.Get("Repr-Digest"), strings.Contains(r.In.Header.Get("Upload-Metadata"), "sha256 ")))
		mu.Unlock()
	}})
	t.Cleanup(proxy.Close)
	return proxy.URL, func() []string {
		mu.Lock()
		defer mu.Unlock()
		return slices.Clone(log)
	}
}

// watchedUpload makes a facility, a 20 MiB file to send to it, and options that
// send it through requestLog's proxy with no chunk limit.
func watchedUpload(t *testing.T) (f *uploadFacility, seen func() []string, data []byte, path string, o uploadOptions) {
	f = newUploadFacility(t)
	proxyURL, seen := requestLog(t, f)
	data = testPattern(20 << 20)
	path = filepath.Join(t.TempDir(), "scan.raw")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	o = f.options(t, proxyURL)
	o.chunkBytes = 0
	return f, seen, data, path, o
}

// TestUploadCommandDeclaresDigestFirst watches the requests `beamledger upload`
// makes by default for a 20 MiB file with no chunk limit: the file's SHA-256 in
// Upload-Metadata at creation, then one PATCH with every byte and the digest again
// as Repr-Digest. The bytes go straight to their content address: no temporary
// object is left or copied. Sent again under another name, the same bytes are
// only checked, and the project's record of them is the answer.
func TestUploadCommandDeclaresDigestFirst(t *testing.T) {
	f, seen, data, path, o := watchedUpload(t)
	var out strings.Builder
	if err := runUploads(context.Background(), o, []string{path}, &out, io.Discard); err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(data)
	want := []string{
		`POST len=0 digest="" meta-sha=true`,
		// [computed: crypto/sha256 of the file] as RFC 9530 writes it.
		fmt.Sprintf(`PATCH len=%d digest="sha-256=:%s:" meta-sha=false`, 20<<20, base64.StdEncoding.EncodeToString(sum[:])),
	}
	if got := seen(); !slices.Equal(got, want) {
		t.Errorf("requests:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	if !strings.HasPrefix(out.String(), hex.EncodeToString(sum[:])+"  ") {
		t.Errorf("printed %q", out.String())
	}
	first := strings.Fields(out.String())
	// A second file with the same bytes: the same record, the same object.
	again := filepath.Join(t.TempDir(), "scan-copy.raw")
	if err := os.WriteFile(again, data, 0o644); err != nil {
		t.Fatal(err)
	}
	out.Reset()
	if err := runUploads(context.Background(), o, []string{again}, &out, io.Discard); err != nil {
		t.Fatal(err)
	}
	if second := strings.Fields(out.String()); len(first) != 3 || len(second) != 3 || second[1] != first[1] {
		t.Errorf("the same bytes sent again printed %q, first %q", second, first)
	}
	var list struct{ Items []fileRecord }
	getJSON(t, f.url+"/api/v1/files?project_id="+f.projectID, f.token, &list)
	if len(list.Items) != 1 || list.Items[0].SHA256 != hex.EncodeToString(sum[:]) || list.Items[0].Status != "stored" {
		t.Errorf("records: %+v, want the one stored file", list.Items)
	}
	if keys := f.objectKeys(t); len(keys) != 1 || !strings.Contains(keys[0], hex.EncodeToString(sum[:])) {
		t.Errorf("objects stored: %v, want only the file's content address", keys)
	}
}

// TestUploadCommandDeclaresDigestLast watches the requests `beamledger upload
// -hash-while-sending` makes for a 20 MiB file with no chunk limit: one PATCH for
// all but the last 8 MiB without a digest, then one PATCH with the rest and the
// file's SHA-256 as Repr-Digest, and nothing declared at creation. A file that
// changes while it is sent is refused by the server and no record is left, in this
// mode and in the default one.
func TestUploadCommandDeclaresDigestLast(t *testing.T) {
	f, seen, data, path, o := watchedUpload(t)
	o.hashWhileSending = true
	var out strings.Builder
	if err := runUploads(context.Background(), o, []string{path}, &out, io.Discard); err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(data)
	want := []string{
		`POST len=0 digest="" meta-sha=false`,
		fmt.Sprintf(`PATCH len=%d digest="" meta-sha=false`, 12<<20),
		// [computed: crypto/sha256 of the file] as RFC 9530 writes it.
		fmt.Sprintf(`PATCH len=%d digest="sha-256=:%s:" meta-sha=false`, 8<<20, base64.StdEncoding.EncodeToString(sum[:])),
	}
	if got := seen(); !slices.Equal(got, want) {
		t.Errorf("requests:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	if !strings.HasPrefix(out.String(), hex.EncodeToString(sum[:])+"  ") {
		t.Errorf("printed %q", out.String())
	}

	// The file changes after it was hashed and before its end is sent: the digest
	// the command declares and the bytes the server receives differ.
	for _, whileSending := range []bool{true, false} {
		name := fmt.Sprintf("changing-%t.raw", whileSending)
		changed := filepath.Join(t.TempDir(), name)
		if err := os.WriteFile(changed, data, 0o644); err != nil {
			t.Fatal(err)
		}
		o = f.options(t, f.url)
		o.chunkBytes = 4 << 20
		o.hashWhileSending = whileSending
		edited := false
		o.client = &http.Client{Transport: roundTripFunc(func(r *http.Request) (*http.Response, error) {
			if r.Method == http.MethodPatch && (r.Header.Get("Repr-Digest") != "" || !whileSending) && !edited {
				// The digest is known, so hashing is over; these bytes are not sent yet.
				edited = true
				fh, err := os.OpenFile(changed, os.O_WRONLY, 0)
				if err != nil {
					return nil, err
				}
				_, err = fh.WriteAt([]byte("edited"), 19<<20)
				fh.Close()
				if err != nil {
					return nil, err
				}
			}
			return http.DefaultTransport.RoundTrip(r)
		})}
		var errOut strings.Builder
		err := runUploads(context.Background(), o, []string{changed}, io.Discard, &errOut)
		if err == nil || !strings.Contains(errOut.String(), "do not match the declared digest") {
			t.Fatalf("upload (hash while sending %t) of a file changed while sent: %v\n%s", whileSending, err, errOut.String())
		}
		var list struct{ Items []fileRecord }
		getJSON(t, f.url+"/api/v1/files?project_id="+f.projectID, f.token, &list)
		for _, r := range list.Items {
			if r.FileName == name {
				t.Errorf("a record of the changed file: %+v", r)
			}
		}
	}
}

type roundTripFunc func(*http.Request) (*http.Response, error)

func (f roundTripFunc) RoundTrip(r *http.Request) (*http.Response, error) { return f(r) }

// TestFileSectionBody: a request body of a file section carries exactly the
// section's bytes, over a plain TCP connection (where net/http hands it to sendfile
// after reading its first bytes), over TLS (read the ordinary way), and read
// directly; the transport's check that the body is no longer than
// announced reads on past the section and must find its end.
func TestFileSectionBody(t *testing.T) {
	data := testPattern(3<<20 + 11)
	path := filepath.Join(t.TempDir(), "scan.raw")
	if err := os.WriteFile(path, data, 0o600); err != nil {
		t.Fatal(err)
	}
	section := func(offset, end int64) *fileSection {
		f, err := os.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { f.Close() })
		if _, err := f.Seek(offset, io.SeekStart); err != nil {
			t.Fatal(err)
		}
		return &fileSection{f: f, pos: offset, end: end}
	}
	var got []byte
	handler := http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { got, _ = io.ReadAll(r.Body) })
	plain, tls := httptest.NewServer(handler), httptest.NewTLSServer(handler) // sendfile; Read only
	defer plain.Close()
	defer tls.Close()
	for i, c := range []struct{ offset, end int64 }{{0, 1 << 20}, {1<<20 + 7, 3 << 20}, {3 << 20, int64(len(data))}, {5, 2<<20 + 1}} {
		srv := plain
		if i%2 == 1 {
			srv = tls
		}
		req, err := http.NewRequest(http.MethodPut, srv.URL, section(c.offset, c.end))
		if err != nil {
			t.Fatal(err)
		}
		req.ContentLength = c.end - c.offset
		res, err := srv.Client().Do(req)
		if err != nil {
			t.Fatalf("section [%d, %d): %v", c.offset, c.end, err)
		}
		res.Body.Close()
		if !bytes.Equal(got, data[c.offset:c.end]) {
			t.Errorf("section [%d, %d) sent %d bytes, not the section's", c.offset, c.end, len(got))
		}
		read, err := io.ReadAll(section(c.offset, c.end))
		if err != nil || !bytes.Equal(read, data[c.offset:c.end]) {
			t.Errorf("section [%d, %d) read %d bytes, not the section's (%v)", c.offset, c.end, len(read), err)
		}
	}
}

// TestPrepareFilesHashesAhead: the next file is opened and hashed while the one
// before is still held (being sent), one file ahead and no further; a file that
// cannot be opened is handed over with its error in its turn; a cancelled context
// ends the preparing.
func TestPrepareFilesHashesAhead(t *testing.T) {
	dir := t.TempDir()
	var files []string
	var want []string
	for i, n := range []int{3 << 20, 1, 0, 5<<20 + 3} {
		path := filepath.Join(dir, fmt.Sprintf("f%d.raw", i))
		data := testPattern(n)
		if i == 1 {
			data = []byte("x")
		}
		if err := os.WriteFile(path, data, 0o600); err != nil {
			t.Fatal(err)
		}
		files, want = append(files, path), append(want, hexSum(data))
	}
	files = slices.Insert(files, 2, filepath.Join(dir, "missing.raw"))
	want = slices.Insert(want, 2, "")

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	next := prepareFiles(ctx, files, true)
	var held []*preparedFile // every file taken stays open: none has been "sent"
	for i := range files {
		p, ok := <-next
		if !ok {
			t.Fatalf("the files ended after %d of %d", i, len(files))
		}
		held = append(held, p)
		if p.path != files[i] {
			t.Fatalf("turn %d: %s, want %s", i, p.path, files[i])
		}
		if want[i] == "" {
			if p.err == nil || p.hashed != nil {
				t.Errorf("the missing file came without its error")
			}
			continue
		}
		select {
		case r := <-p.hashed:
			if r.err != nil || r.sum != want[i] {
				t.Errorf("%s: hashed %q, %v; want %s", p.path, r.sum, r.err, want[i])
			}
			if p.read.Load() != p.st.Size() {
				t.Errorf("%s: %d of %d bytes counted as hashed", p.path, p.read.Load(), p.st.Size())
			}
		case <-time.After(10 * time.Second):
			t.Fatalf("%s was not hashed while the files before it were held", p.path)
		}
	}
	if _, ok := <-next; ok {
		t.Errorf("a file past the list")
	}
	for _, p := range held {
		p.close()
	}

	// Cancelled after the first file: the channel closes without the rest. By
	// then the second file waits in the channel and the third may be on offer;
	// a select with both the offer and the cancel ready picks either, so the
	// third may still come, but nothing after it.
	ctx2, cancel2 := context.WithCancel(context.Background())
	next = prepareFiles(ctx2, files, true)
	first := <-next
	cancel2()
	n := 0
	for p := range next {
		p.close()
		n++
	}
	first.close()
	if n > 2 {
		t.Errorf("%d files prepared after the cancel; at most the one waiting and the one on offer", n)
	}
}

// TestReopenRefusesReplacedFile: each request reopens the file being sent; a file
// put in its place under the same name (a new inode) is refused, not sent.
func TestReopenRefusesReplacedFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "scan.raw")
	if err := os.WriteFile(path, testPattern(1000), 0o600); err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		t.Fatal(err)
	}
	c := &tusClient{file: f, info: st, size: st.Size()}
	g, err := c.reopen(400)
	if err != nil {
		t.Fatalf("reopening the same file: %v", err)
	}
	rest, _ := io.ReadAll(g)
	g.Close()
	if !bytes.Equal(rest, testPattern(1000)[400:]) {
		t.Errorf("reopened at 400: %d bytes, not the file's rest", len(rest))
	}
	other := filepath.Join(dir, "other.raw")
	if err := os.WriteFile(other, testPattern(1000), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.Rename(other, path); err != nil {
		t.Fatal(err)
	}
	if g, err := c.reopen(0); !errors.Is(err, errReading) {
		if g != nil {
			g.Close()
		}
		t.Errorf("a replaced file reopened: %v", err)
	}
}

// TestProgressFollowKeepsPhaseRate: an upload sent in several requests follows the
// same phase once per request, and its rate runs from where the phase began, not
// from the last request; a new phase starts its rate afresh from where it stands.
func TestProgressFollowKeepsPhaseRate(t *testing.T) {
	p := newProgress(io.Discard, "scan.raw", 100<<20, uploadOptions{progressEvery: time.Hour})
	at := int64(10 << 20)
	pos := func() (int64, bool) { return at, true }
	p.follow("hashing", pos)()
	if p.phase != "hashing" || p.startN != 10<<20 || p.doneN != 10<<20 {
		t.Fatalf("new phase: phase %q, start %d, done %d", p.phase, p.startN, p.doneN)
	}
	// A resumed upload: its first request goes on from 4 MiB.
	at = 4 << 20
	p.set(at)
	p.follow("uploading", pos)()
	began := p.started
	for _, off := range []int64{8 << 20, 12 << 20} {
		p.set(off)
		at = off
		p.follow("uploading", pos)()
		if p.started != began || p.startN != 4<<20 {
			t.Errorf("request at %d: the phase's rate starts at %d from %v, want 4 MiB from %v", off, p.startN, p.started, began)
		}
	}
}
