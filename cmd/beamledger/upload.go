package main

import (
	"context"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"time"
)

// uploadOptions is what `beamledger upload` runs with.
type uploadOptions struct {
	server, token        string
	acquisition, project string
	mediaType            string
	statePath            string
	chunkBytes           int64
	// hashWhileSending sends each file as it is hashed instead of after, and
	// declares its digest only on the last request.
	hashWhileSending bool
	retries          int           // consecutive failures before a file is given up
	backoff          time.Duration // the first wait; it doubles up to a minute
	client           *http.Client
	progressEvery    time.Duration // how often plain (non-terminal) progress lines appear
	terminal         bool
}

// cmdUpload sends files (or folders' files) to the server as resumable uploads,
// the way an instrument computer hands over what it recorded: each file is hashed
// first (a folder's next file while the one before is sent) and its digest
// declared when the upload is created, so the server writes
// the bytes straight to their content address (and, for bytes it holds already,
// only checks them) and checks the digest before recording the file. With
// -hash-while-sending the file is read once, hashed as it goes, and its digest
// declared on the last request; the server then stores the bytes under a temporary
// name and copies them to their content address at the end. A network failure is
// waited out and the upload resumed from the offset the server holds, and the
// upload's address is kept in a state file, so running the command again after a
// crash resumes too. Prints "<sha256>  <record id>  <path>" per file.
func cmdUpload(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("upload", flag.ContinueOnError)
	fs.SetOutput(stderr)
	o := uploadOptions{retries: 8, backoff: time.Second, progressEvery: 10 * time.Second, client: &http.Client{}}
	fs.StringVar(&o.server, "server", os.Getenv("BEAMLEDGER_SERVER"), "server URL, such as https://beamledger.example ($BEAMLEDGER_SERVER)")
	fs.StringVar(&o.token, "token", "", "access or agent token (better: $BEAMLEDGER_TOKEN or $BEAMLEDGER_TOKEN_FILE, which other users cannot read in the process list)")
	fs.StringVar(&o.acquisition, "acquisition", "", "the acquisition the files were recorded in")
	fs.StringVar(&o.project, "project", "", "for processed files: their project")
	fs.StringVar(&o.mediaType, "media-type", "", "media type of every file (default application/octet-stream)")
	fs.StringVar(&o.statePath, "state", "", "state file of unfinished uploads (default $XDG_CACHE_HOME/beamledger/uploads.json)")
	chunk := fs.Int64("chunk-bytes", 0, "bytes sent per request at most (0: no limit; a proxy in the way may need one)")
	fs.BoolVar(&o.hashWhileSending, "hash-while-sending", false, "hash each file as it is sent rather than before: one read of the file instead of two, "+
		"for files on a disk slower than the network; the server then copies the stored bytes once more at the end")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: beamledger upload -server URL (-acquisition ID | -project ID) [flags] FILE-OR-FOLDER...")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		return err
	}
	o.chunkBytes = *chunk
	if o.token == "" {
		t, err := secret("BEAMLEDGER_TOKEN")
		if err != nil {
			return err
		}
		o.token = t
	}
	switch {
	case o.server == "" || o.token == "":
		return &exitError{2, errors.New("give -server and a token ($BEAMLEDGER_TOKEN or $BEAMLEDGER_TOKEN_FILE)")}
	case (o.acquisition == "") == (o.project == ""):
		return &exitError{2, errors.New("give -acquisition ID for recorded data or -project ID for processed files")}
	case fs.NArg() == 0:
		return &exitError{2, errors.New("name at least one file or folder")}
	case o.chunkBytes < 0:
		return &exitError{2, errors.New("-chunk-bytes must not be negative")}
	}
	if o.statePath == "" {
		dir, err := os.UserCacheDir()
		if err != nil {
			return fmt.Errorf("no cache folder for the upload state (give -state): %w", err)
		}
		o.statePath = filepath.Join(dir, "beamledger", "uploads.json")
	}
	if f, ok := stderr.(*os.File); ok {
		if st, err := f.Stat(); err == nil && st.Mode()&os.ModeCharDevice != 0 {
			o.terminal = true
		}
	}
	return runUploads(ctx, o, fs.Args(), stdout, stderr)
}

// runUploads uploads every file under paths, going on after a failed file, and
// fails if any did. The files are opened (and, unless hashing while sending, hashed)
// by prepareFiles one turn ahead of their sending.
func runUploads(ctx context.Context, o uploadOptions, paths []string, stdout, stderr io.Writer) error {
	files, err := filesUnder(paths)
	if err != nil {
		return err
	}
	ctx, stop := context.WithCancel(ctx)
	defer stop()
	next := prepareFiles(ctx, files, !o.hashWhileSending)
	defer func() {
		stop()
		for p := range next { // what was prepared but not sent
			p.close()
		}
	}()
	state := &uploadState{path: o.statePath}
	failed := 0
	for p := range next {
		if err := ctx.Err(); err != nil {
			p.close()
			return err
		}
		sum, id, err := uploadOne(ctx, o, state, p, stderr)
		p.close()
		if err != nil {
			failed++
			fmt.Fprintf(stderr, "beamledger upload: %s: %v\n", p.path, err)
			continue
		}
		fmt.Fprintf(stdout, "%s  %s  %s\n", sum, id, p.path)
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	if failed > 0 {
		return fmt.Errorf("%d of %d files failed", failed, len(files))
	}
	return nil
}

// preparedFile is a file opened for its turn, with its digest on the way.
type preparedFile struct {
	path string
	f    *os.File
	st   os.FileInfo
	err  error // why it could not be opened
	// hashed delivers the digest once, when hashed ahead (nil otherwise); read
	// counts the bytes hashed so far.
	hashed chan hashResult
	read   atomic.Int64
}

func (p *preparedFile) close() {
	if p.f != nil {
		p.f.Close()
	}
}

// prepareFiles opens the files in order and, with hash set, hashes each as soon as
// the one before is hashed: the first is hashed while nothing else happens, every
// other while the one before it is sent, so a folder costs one file's hashing more
// than its sending rather than every file's. It stays one file ahead of the sending
// (the channel holds one), and stops when ctx ends; the caller closes what it takes.
func prepareFiles(ctx context.Context, files []string, hash bool) <-chan *preparedFile {
	out := make(chan *preparedFile, 1)
	go func() {
		defer close(out)
		for _, path := range files {
			// Checked first: a select with both cases ready picks either, so
			// once cancelled it would otherwise go on handing files over as
			// fast as they are taken.
			if ctx.Err() != nil {
				return
			}
			p := &preparedFile{path: path}
			if p.f, p.err = os.Open(path); p.err == nil {
				if p.st, p.err = p.f.Stat(); p.err != nil {
					p.f.Close()
					p.f = nil
				}
			}
			if hash && p.err == nil {
				p.hashed = make(chan hashResult, 1)
			}
			select {
			case out <- p:
			case <-ctx.Done():
				p.close()
				return
			}
			if p.hashed != nil {
				p.hashed <- hashFile(ctx, p.f, p.st.Size(), countingWriter{&p.read})
			}
		}
	}()
	return out
}

// countingWriter counts what is written to it.
type countingWriter struct{ n *atomic.Int64 }

func (w countingWriter) Write(b []byte) (int, error) {
	w.n.Add(int64(len(b)))
	return len(b), nil
}

// filesUnder lists the regular files named or under the folders named, in order.
func filesUnder(paths []string) ([]string, error) {
	var out []string
	for _, p := range paths {
		err := filepath.WalkDir(p, func(path string, d fs.DirEntry, err error) error {
			if err != nil {
				return err
			}
			if d.Type().IsRegular() {
				out = append(out, path)
			}
			return nil
		})
		if err != nil {
			return nil, err
		}
	}
	return out, nil
}

// uploadOne creates (or finds again) and sends one prepared file. By default its
// digest, hashed ahead, is declared at creation, and the bar shows the hashing while
// it is waited for. With -hash-while-sending a second reader hashes the file beside
// the sending: all but the last few MiB go first, and the last request declares the
// digest (Repr-Digest, RFC 9530), which the server checks before it records the file.
func uploadOne(ctx context.Context, o uploadOptions, state *uploadState, p *preparedFile, stderr io.Writer) (sum, id string, err error) {
	if p.err != nil {
		return "", "", p.err
	}
	path, f, st := p.path, p.f, p.st
	bar := newProgress(stderr, filepath.Base(path), st.Size(), o)
	hashed := p.hashed
	if hashed == nil {
		// Hashed beside the sending, by a reader that stops when the file is done with.
		hashCtx, stopHashing := context.WithCancel(ctx)
		defer stopHashing()
		ch := make(chan hashResult, 1)
		go func() { ch <- hashFile(hashCtx, f, st.Size(), nil) }()
		hashed = ch
	}
	abs, _ := filepath.Abs(path)
	key := strings.Join([]string{o.server, abs, strconv.FormatInt(st.Size(), 10), strconv.FormatInt(st.ModTime().UnixNano(), 10)}, "|")
	c := &tusClient{o: o, file: f, info: st, size: st.Size(), bar: bar, hashed: hashed}
	if !o.hashWhileSending {
		stop := bar.follow("hashing", func() (int64, bool) { return p.read.Load(), true })
		_, err := c.digest(ctx)
		stop()
		if err != nil {
			bar.done(err)
			return "", "", err
		}
		c.declared = true
	}
	loc := state.get(key)
	offset := int64(-1)
	if loc != "" {
		if offset, err = c.head(ctx, loc); err != nil {
			offset = -1 // gone (expired, or ended elsewhere): begin again
		}
	}
	if offset < 0 {
		if loc, err = c.create(ctx, filepath.Base(path)); err != nil {
			return "", "", err
		}
		offset = 0
		state.put(key, loc)
	}
	id, err = c.send(ctx, loc, offset)
	bar.done(err)
	if err == nil || errors.Is(err, errUploadGone) {
		state.put(key, "")
	}
	return c.sum, id, err
}

// hashResult is the file's SHA-256 in hex, or why it could not be read.
type hashResult struct {
	sum string
	err error
}

// hashFile hashes the file's size bytes from the start, through its own section
// reader, so it can run beside the sending without sharing a file offset. Reading
// in large blocks rather than io.Copy's 32 KiB cuts the system calls. The bytes
// read are also written to progress when it is not nil.
func hashFile(ctx context.Context, f *os.File, size int64, progress io.Writer) hashResult {
	h := sha256.New()
	buf := make([]byte, 1<<20)
	r := io.NewSectionReader(f, 0, size)
	for {
		if err := ctx.Err(); err != nil {
			return hashResult{err: err}
		}
		n, err := r.Read(buf)
		h.Write(buf[:n])
		if progress != nil {
			progress.Write(buf[:n])
		}
		if err == io.EOF {
			return hashResult{sum: hex.EncodeToString(h.Sum(nil))}
		}
		if err != nil {
			return hashResult{err: err}
		}
	}
}

// lastRequestBytes is how much of a file the final request carries: the request
// that declares the digest, so it waits for the hashing to finish.
const lastRequestBytes = 8 << 20

// errUploadGone is an upload the server no longer knows, or refused for good.
var errUploadGone = errors.New("the server discarded the upload")

// tusClient speaks tus 1.0.0 for one file.
type tusClient struct {
	o    uploadOptions
	file *os.File
	info os.FileInfo // of file, to know it again when reopened
	size int64
	bar  *progress
	// hashed delivers the file's digest once; sum holds it after.
	hashed <-chan hashResult
	sum    string
	// declared: the digest was known before the upload began, and goes with its
	// creation.
	declared bool
}

// digest waits for the file's SHA-256.
func (c *tusClient) digest(ctx context.Context) (string, error) {
	if c.sum != "" {
		return c.sum, nil
	}
	select {
	case r := <-c.hashed:
		if r.err != nil {
			return "", fmt.Errorf("hashing the file: %w", r.err)
		}
		c.sum = r.sum
		return c.sum, nil
	case <-ctx.Done():
		return "", ctx.Err()
	}
}

func (c *tusClient) request(ctx context.Context, method, target string, body io.Reader, header map[string]string) (*http.Response, error) {
	// Locations are paths on the server (tus allows absolute URLs too).
	u := target
	if !strings.Contains(target, "://") {
		u = strings.TrimSuffix(c.o.server, "/") + target
	}
	var size int64 = -1
	if sb, ok := body.(sizedBody); ok {
		body, size = sb.r, sb.n
	}
	req, err := http.NewRequestWithContext(ctx, method, u, body)
	if err != nil {
		if c, ok := body.(io.Closer); ok {
			c.Close() // no transport took it
		}
		return nil, err
	}
	if size >= 0 {
		req.ContentLength = size // tus servers want to know what is coming
	}
	req.Header.Set("Tus-Resumable", "1.0.0")
	req.Header.Set("Authorization", "Bearer "+c.o.token)
	for k, v := range header {
		req.Header.Set(k, v)
	}
	return c.o.client.Do(req)
}

// sizedBody is a request body of known length.
type sizedBody struct {
	r io.Reader
	n int64
}

func (b sizedBody) Read(p []byte) (int, error) { return b.r.Read(p) }

// create begins the upload and returns its location.
func (c *tusClient) create(ctx context.Context, name string) (string, error) {
	meta := []string{"filename " + b64(name)}
	if c.o.acquisition != "" {
		meta = append(meta, "acquisition_id "+b64(c.o.acquisition))
	} else {
		meta = append(meta, "project_id "+b64(c.o.project))
	}
	if c.o.mediaType != "" {
		meta = append(meta, "media_type "+b64(c.o.mediaType))
	}
	if c.declared {
		meta = append(meta, "sha256 "+b64(c.sum))
	}
	res, err := c.request(ctx, http.MethodPost, "/api/v1/uploads", nil, map[string]string{
		"Upload-Length": strconv.FormatInt(c.size, 10), "Upload-Metadata": strings.Join(meta, ",")})
	if err != nil {
		return "", err
	}
	defer res.Body.Close()
	if res.StatusCode != http.StatusCreated {
		return "", answerError(res)
	}
	return res.Header.Get("Location"), nil
}

// head asks for the offset the server holds.
func (c *tusClient) head(ctx context.Context, loc string) (int64, error) {
	res, err := c.request(ctx, http.MethodHead, loc, nil, nil)
	if err != nil {
		return 0, err
	}
	res.Body.Close()
	if res.StatusCode == http.StatusNotFound {
		return 0, errUploadGone
	}
	if res.StatusCode != http.StatusOK {
		return 0, fmt.Errorf("HEAD: %s", res.Status)
	}
	return strconv.ParseInt(res.Header.Get("Upload-Offset"), 10, 64)
}

// send PATCHes chunks from offset to the end, resuming after failures from the
// offset the server reports, and returns the stored file's record id.
func (c *tusClient) send(ctx context.Context, loc string, offset int64) (string, error) {
	failures := 0
	for {
		id, next, err := c.patch(ctx, loc, offset)
		switch {
		case errors.Is(err, errHashing), errors.Is(err, errReading):
			return "", err
		case err == nil && id != "":
			return id, nil
		case err == nil:
			offset, failures = next, 0
			continue
		case errors.Is(err, errUploadGone), ctx.Err() != nil:
			return "", err
		}
		failures++
		if failures > c.o.retries {
			return "", err
		}
		wait := min(c.o.backoff<<(failures-1), time.Minute)
		c.bar.note(fmt.Sprintf("%v; resuming in %s", err, wait.Round(time.Millisecond)))
		select {
		case <-ctx.Done():
			return "", ctx.Err()
		case <-time.After(wait):
		}
		if got, herr := c.head(ctx, loc); herr == nil {
			offset = got
		} else if errors.Is(herr, errUploadGone) {
			return "", herr
		}
	}
}

// fileSection is a request body of a file's bytes from pos up to end, pos being the
// file's offset. It is a syscall.Conn too: net/http sends a body of announced length
// through a limit of that length, and a TCP connection sends a limited syscall.Conn
// with sendfile(2), so the kernel moves the bytes from the page cache to the socket
// without copying them through this process. Read, the way otherwise (a TLS
// connection), stops at end; it counts what it reads, and asks the file for its
// offset again only after the descriptor was lent out, since sendfile moves it.
type fileSection struct {
	f        *os.File
	pos, end int64
	lent     bool
}

func (s *fileSection) Read(p []byte) (int, error) {
	if s.lent {
		pos, err := s.f.Seek(0, io.SeekCurrent)
		if err != nil {
			return 0, err
		}
		s.pos, s.lent = pos, false
	}
	if s.pos >= s.end {
		return 0, io.EOF
	}
	if int64(len(p)) > s.end-s.pos {
		p = p[:s.end-s.pos]
	}
	n, err := s.f.Read(p)
	s.pos += int64(n)
	return n, err
}

func (s *fileSection) Close() error { return s.f.Close() }

func (s *fileSection) SyscallConn() (syscall.RawConn, error) {
	s.lent = true
	return s.f.SyscallConn()
}

// reopen opens the file being sent once more, positioned at offset, for one
// request to own. It refuses a file that is no longer the one being sent (replaced
// under its name).
func (c *tusClient) reopen(offset int64) (*os.File, error) {
	f, err := os.Open(c.file.Name())
	if err != nil {
		return nil, err
	}
	st, err := f.Stat()
	if err == nil && !os.SameFile(st, c.info) {
		err = fmt.Errorf("%s was replaced while it was being sent", c.file.Name())
	}
	if err == nil {
		_, err = f.Seek(offset, io.SeekStart)
	}
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("%w: %v", errReading, err)
	}
	return f, nil
}

// errHashing is a file that could not be read for its digest.
var errHashing = errors.New("the file could not be hashed")

// errReading is a file that could not be opened again to send the rest of it.
var errReading = errors.New("the file could not be read")

// patch sends the next request's bytes from offset, up to chunkBytes (0: no
// limit). A digest declared at creation goes again, as Repr-Digest, on the request
// that ends the file. Otherwise the requests carry all but the file's last
// lastRequestBytes and then the rest with the file's digest. It returns the record
// id once the file is complete, else the new offset.
func (c *tusClient) patch(ctx context.Context, loc string, offset int64) (id string, next int64, err error) {
	header := map[string]string{"Content-Type": "application/offset+octet-stream", "Upload-Offset": strconv.FormatInt(offset, 10)}
	end := max(c.size-lastRequestBytes, 0)
	if c.declared {
		end = c.size
	}
	if c.o.chunkBytes > 0 {
		end = min(end, offset+c.o.chunkBytes)
	}
	if c.declared && end == c.size {
		header["Repr-Digest"] = reprDigest(c.sum)
	} else if offset >= end {
		sum, err := c.digest(ctx)
		if err != nil {
			return "", 0, fmt.Errorf("%w: %v", errHashing, err)
		}
		header["Repr-Digest"] = reprDigest(sum)
		end = c.size
		if c.o.chunkBytes > 0 {
			end = min(end, offset+c.o.chunkBytes)
		}
	}
	n := end - offset
	c.bar.set(offset)
	var body io.Reader = http.NoBody
	if n > 0 {
		f, err := c.reopen(offset)
		if err != nil {
			return "", 0, err
		}
		// The request's own file at the offset, which the transport closes once it is
		// done with it (after a failure, that can be after Do has returned: no other
		// request shares its offset). The bar follows the file's offset meanwhile.
		body = &fileSection{f: f, pos: offset, end: offset + n}
		stop := c.bar.follow("uploading", func() (int64, bool) {
			off, err := f.Seek(0, io.SeekCurrent)
			return off, err == nil
		})
		defer stop()
	}
	res, err := c.request(ctx, http.MethodPatch, loc, sizedBody{body, n}, header)
	if err != nil {
		return "", 0, err
	}
	defer res.Body.Close()
	switch {
	case res.StatusCode == http.StatusNoContent:
		next, err = strconv.ParseInt(res.Header.Get("Upload-Offset"), 10, 64)
		if err == nil && next == c.size {
			if id = res.Header.Get("Data-File-Id"); id == "" {
				err = errors.New("the server finished the upload without naming its record")
			}
		}
		return id, next, err
	case res.StatusCode == http.StatusConflict, res.StatusCode >= 500:
		return "", 0, answerError(res) // retried: HEAD says where to go on
	case res.StatusCode == http.StatusNotFound:
		return "", 0, errUploadGone
	}
	return "", 0, fmt.Errorf("%w: %v", errUploadGone, answerError(res))
}

// answerError words a refusal with the server's message.
func answerError(res *http.Response) error {
	var body struct {
		Error struct{ Message string } `json:"error"`
	}
	b, _ := io.ReadAll(io.LimitReader(res.Body, 64<<10))
	if json.Unmarshal(b, &body) == nil && body.Error.Message != "" {
		return fmt.Errorf("%s: %s", res.Status, body.Error.Message)
	}
	return errors.New(res.Status)
}

// reprDigest writes a hex SHA-256 as an RFC 9530 Repr-Digest field.
func reprDigest(sum string) string {
	b, _ := hex.DecodeString(sum)
	return "sha-256=:" + base64.StdEncoding.EncodeToString(b) + ":"
}

func b64(s string) string { return base64.StdEncoding.EncodeToString([]byte(s)) }

// uploadState remembers the location of each unfinished upload, keyed by server,
// path, size, modification time and digest, so that a changed file starts afresh.
type uploadState struct {
	path string
	mu   sync.Mutex
}

func (s *uploadState) load() map[string]string {
	m := map[string]string{}
	if b, err := os.ReadFile(s.path); err == nil {
		_ = json.Unmarshal(b, &m) // a damaged state only costs a fresh start
	}
	return m
}

func (s *uploadState) get(key string) string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.load()[key]
}

// put records loc for key ("" forgets it), writing the file whole and renaming it
// into place so a crash never leaves it half written.
func (s *uploadState) put(key, loc string) {
	s.mu.Lock()
	defer s.mu.Unlock()
	m := s.load()
	if loc == "" {
		delete(m, key)
	} else {
		m[key] = loc
	}
	b, _ := json.MarshalIndent(m, "", "  ")
	if err := os.MkdirAll(filepath.Dir(s.path), 0o700); err != nil {
		return
	}
	tmp := s.path + ".tmp"
	if os.WriteFile(tmp, b, 0o600) == nil {
		_ = os.Rename(tmp, s.path)
	}
}
