package objects

import (
	"bytes"
	"context"
	"crypto/rand"
	"errors"
	"io"
	"slices"
	"strings"
	"testing"
	"time"

	"beamledger"
)

// storeCase makes one implementation for the suite.
type storeCase struct {
	name string
	open func(t *testing.T) Store
}

var stores = []storeCase{
	{"disk", func(t *testing.T) Store {
		d, err := NewDisk(t.TempDir())
		if err != nil {
			t.Fatal(err)
		}
		return d
	}},
	{"s3", func(t *testing.T) Store { return newTestS3(t, harnessS3Config(t)) }},
}

// conformance lists what every Store must do; each case gets its own key
// prefix, so cases run in parallel on one store.
var conformance = []struct {
	name string
	run  func(t *testing.T, st Store, p string)
}{
	{"PutStatOpen", testPutStatOpen},
	{"Ranges", testRanges},
	{"EmptyObject", testEmptyObject},
	{"UnknownSize", testUnknownSize},
	{"LargerThanOnePart", testLargerThanOnePart},
	{"ShortInput", testShortInput},
	{"InvisibleUntilWritten", testInvisibleUntilWritten},
	{"CancelledPut", testCancelledPut},
	{"Promote", testPromote},
	{"Delete", testDelete},
	{"List", testList},
	{"Multipart", testMultipart},
	{"MultipartRefusals", testMultipartRefusals},
	{"MultipartAbort", testMultipartAbort},
	{"NotFound", testNotFound},
	{"BadKeys", testBadKeys},
}

// TestConformance runs the one suite against every store.
func TestConformance(t *testing.T) {
	for _, sc := range stores {
		t.Run(sc.name, func(t *testing.T) {
			st := sc.open(t)
			if !strings.Contains(st.Name(), "://") {
				t.Errorf("Name %q is not a URL", st.Name())
			}
			for _, c := range conformance {
				t.Run(c.name, func(t *testing.T) {
					t.Parallel()
					c.run(t, st, "t"+strings.ToLower(rand.Text()[:8])+"/")
				})
			}
		})
	}
}

func testPutStatOpen(t *testing.T, st Store, p string) {
	before := time.Now().Add(-time.Minute) // servers' clocks and second precision
	info := put(t, st, p+"abc", []byte("abc"))
	if info.Key != p+"abc" || info.Size != 3 || info.Modified.Before(before) || info.Modified.After(time.Now().Add(time.Minute)) {
		t.Errorf("Put returned %+v", info)
	}
	got, err := st.Stat(t.Context(), p+"abc")
	if err != nil || got.Size != 3 || got.Key != p+"abc" {
		t.Errorf("Stat = %+v, %v", got, err)
	}
	b := read(t, st, p+"abc", 0, -1)
	// SHA-256("abc") [published: FIPS 180-4 examples, REFERENCE.md §4].
	if h := sha256Hex(b); h != "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad" {
		t.Errorf("read back %q, SHA-256 %s", b, h)
	}
	// A second Put replaces the object.
	put(t, st, p+"abc", []byte("abcd"))
	if b := read(t, st, p+"abc", 0, -1); string(b) != "abcd" {
		t.Errorf("after replacing: %q", b)
	}
}

// testRanges pins the range rules: a range running past the end stops at
// it, one starting at the end is empty, one starting past it is ErrInvalid.
func testRanges(t *testing.T, st Store, p string) {
	data := []byte("0123456789")
	put(t, st, p+"r", data)
	for _, c := range []struct {
		offset, length int64
		want           string
	}{
		{0, -1, "0123456789"},
		{0, 3, "012"},
		{3, -1, "3456789"},
		{4, 2, "45"},
		{9, 1, "9"},
		{8, 5, "89"}, // past the end: stops there
		{10, -1, ""}, // at the end
		{10, 4, ""},  // at the end
		{5, 0, ""},   // nothing asked
		{0, 100, "0123456789"},
	} {
		if got := read(t, st, p+"r", c.offset, c.length); string(got) != c.want {
			t.Errorf("[%d,%d]: %q, want %q", c.offset, c.length, got, c.want)
		}
	}
	for _, c := range []struct{ offset, length int64 }{{11, -1}, {11, 1}, {-1, 1}, {0, -2}} {
		_, err := st.Open(t.Context(), p+"r", c.offset, c.length)
		wantKind(t, err, beamledger.ErrInvalid, "Open past the end or with a bad range")
	}
}

func testEmptyObject(t *testing.T, st Store, p string) {
	info := put(t, st, p+"empty", nil)
	if info.Size != 0 {
		t.Errorf("Put empty: %+v", info)
	}
	for _, r := range [][2]int64{{0, -1}, {0, 10}, {0, 0}} {
		if b := read(t, st, p+"empty", r[0], r[1]); len(b) != 0 {
			t.Errorf("%v: %q", r, b)
		}
	}
	_, err := st.Open(t.Context(), p+"empty", 1, -1)
	wantKind(t, err, beamledger.ErrInvalid, "Open past the end of an empty object")
	// Unknown size, nothing to read: still an (empty) object.
	if _, err := st.Put(t.Context(), p+"empty2", onlyReader{strings.NewReader("")}, -1, PutOptions{}); err != nil {
		t.Fatal(err)
	}
	if info, err := st.Stat(t.Context(), p+"empty2"); err != nil || info.Size != 0 {
		t.Errorf("Stat of an empty unknown-size Put: %+v, %v", info, err)
	}
}

// testUnknownSize streams a few MiB of random data of unknown size (less than
// one part) and checks the SHA-256 of what comes back.
func testUnknownSize(t *testing.T, st Store, p string) {
	data := randomBytes(3<<20+123, 1)
	info, err := st.Put(t.Context(), p+"u", onlyReader{bytes.NewReader(data)}, -1, PutOptions{ContentType: "application/octet-stream"})
	if err != nil {
		t.Fatal(err)
	}
	if info.Size != int64(len(data)) {
		t.Errorf("Put size %d, want %d", info.Size, len(data))
	}
	if got := read(t, st, p+"u", 0, -1); sha256Hex(got) != sha256Hex(data) {
		t.Errorf("read back %d bytes with another SHA-256", len(got))
	}
}

// testLargerThanOnePart puts more than two parts' worth (S3 uses multipart
// then), with the size given and unknown, and checks bytes and the seams.
func testLargerThanOnePart(t *testing.T, st Store, p string) {
	data := randomBytes(2*testPartSize+17, 2)
	for _, c := range []struct {
		name string
		r    io.Reader
		size int64
	}{
		{"known", bytes.NewReader(data), int64(len(data))},
		{"known-stream", onlyReader{bytes.NewReader(data)}, int64(len(data))},
		{"unknown", onlyReader{bytes.NewReader(data)}, -1},
	} {
		key := p + c.name
		if _, err := st.Put(t.Context(), key, c.r, c.size, PutOptions{}); err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if got := read(t, st, key, 0, -1); sha256Hex(got) != sha256Hex(data) {
			t.Errorf("%s: read back %d bytes with another SHA-256", c.name, len(got))
		}
		// Across the first part boundary.
		if got := read(t, st, key, testPartSize-3, 6); !bytes.Equal(got, data[testPartSize-3:testPartSize+3]) {
			t.Errorf("%s: range across the part boundary differs", c.name)
		}
	}
}

// testShortInput gives Put fewer bytes than announced: an error, and no
// object (not a truncated one).
func testShortInput(t *testing.T, st Store, p string) {
	for _, size := range []int64{10, 2*testPartSize + 1} {
		data := randomBytes(int(size)-5, 3)
		_, err := st.Put(t.Context(), p+"short", onlyReader{bytes.NewReader(data)}, size, PutOptions{})
		wantKind(t, err, beamledger.ErrInvalid, "Put of a short input")
		_, err = st.Stat(t.Context(), p+"short")
		wantKind(t, err, beamledger.ErrNotFound, "Stat after a short Put")
	}
	if ids := pending(t, st, p); len(ids) != 0 {
		t.Errorf("uploads left pending: %v", ids)
	}
}

// testInvisibleUntilWritten looks for the object while Put is half-way.
func testInvisibleUntilWritten(t *testing.T, st Store, p string) {
	data := randomBytes(1<<20, 4)
	var seen error
	half := false
	r := readerFunc(func(b []byte) (int, error) {
		if len(data) <= 1<<19 && !half {
			half = true
			_, seen = st.Stat(t.Context(), p+"half")
		}
		if len(data) == 0 {
			return 0, io.EOF
		}
		n := copy(b, data[:min(len(b), 64<<10)])
		data = data[n:]
		return n, nil
	})
	if _, err := st.Put(t.Context(), p+"half", r, 1<<20, PutOptions{}); err != nil {
		t.Fatal(err)
	}
	if !half {
		t.Fatal("the reader was never half-way")
	}
	wantKind(t, seen, beamledger.ErrNotFound, "Stat while Put is half-way")
}

// testCancelledPut cancels the context while Put reads its source, after
// more than one part for unknown sizes: no object and no upload may remain.
func testCancelledPut(t *testing.T, st Store, p string) {
	for _, c := range []struct {
		name       string
		size       int64
		cancelAt   int
		totalBytes int
	}{
		{"known-one-part", 1 << 20, 1 << 19, 1 << 20},
		{"known-multipart", 3 * testPartSize, testPartSize + 1<<20, 3 * testPartSize},
		{"unknown", -1, testPartSize + 1<<20, 3 * testPartSize},
	} {
		ctx, cancel := context.WithCancel(t.Context())
		data := randomBytes(c.totalBytes, 5)
		sent := 0
		r := readerFunc(func(b []byte) (int, error) {
			if sent >= c.cancelAt {
				cancel()
			}
			if sent == len(data) {
				return 0, io.EOF
			}
			n := copy(b, data[sent:min(len(data), sent+64<<10)])
			sent += n
			return n, nil
		})
		_, err := st.Put(ctx, p+c.name, r, c.size, PutOptions{})
		cancel()
		if err == nil {
			t.Errorf("%s: Put succeeded though cancelled", c.name)
		}
		_, err = st.Stat(t.Context(), p+c.name)
		wantKind(t, err, beamledger.ErrNotFound, c.name+": Stat after a cancelled Put")
	}
	if ids := pending(t, st, p); len(ids) != 0 {
		t.Errorf("uploads left pending: %v", ids)
	}
}

func testPromote(t *testing.T, st Store, p string) {
	put(t, st, p+"incoming/1", []byte("first"))
	if err := st.Promote(t.Context(), p+"incoming/1", p+"sha256/ab/abc"); err != nil {
		t.Fatal(err)
	}
	_, err := st.Stat(t.Context(), p+"incoming/1")
	wantKind(t, err, beamledger.ErrNotFound, "Stat of a promoted object's old key")
	if b := read(t, st, p+"sha256/ab/abc", 0, -1); string(b) != "first" {
		t.Errorf("promoted object reads %q", b)
	}
	// Onto an existing key: replaced.
	put(t, st, p+"incoming/2", []byte("second"))
	if err := st.Promote(t.Context(), p+"incoming/2", p+"sha256/ab/abc"); err != nil {
		t.Fatal(err)
	}
	if b := read(t, st, p+"sha256/ab/abc", 0, -1); string(b) != "second" {
		t.Errorf("promoted over an object, reads %q", b)
	}
	err = st.Promote(t.Context(), p+"incoming/none", p+"x")
	wantKind(t, err, beamledger.ErrNotFound, "Promote of a missing object")
	if _, err := st.Stat(t.Context(), p+"x"); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("a failed Promote made its target: %v", err)
	}
	// Onto itself: nothing changes.
	if err := st.Promote(t.Context(), p+"sha256/ab/abc", p+"sha256/ab/abc"); err != nil {
		t.Fatal(err)
	}
	if b := read(t, st, p+"sha256/ab/abc", 0, -1); string(b) != "second" {
		t.Errorf("promoted onto itself, reads %q", b)
	}
}

func testDelete(t *testing.T, st Store, p string) {
	put(t, st, p+"d", []byte("x"))
	for i := range 2 {
		if err := st.Delete(t.Context(), p+"d"); err != nil {
			t.Fatalf("Delete #%d: %v", i+1, err)
		}
	}
	_, err := st.Stat(t.Context(), p+"d")
	wantKind(t, err, beamledger.ErrNotFound, "Stat after Delete")
	if err := st.Delete(t.Context(), p+"never/was"); err != nil {
		t.Errorf("Delete of a key never used: %v", err)
	}
}

// testList uses keys whose order differs between a tree walk and a sort:
// '-' and '.' sort before '/', letters and digits after it.
func testList(t *testing.T, st Store, p string) {
	names := []string{"b", "a/b", "a-c", "a.b", "a0", "a/a/z", "ab", "a/a-"}
	for i, n := range names {
		put(t, st, p+n, bytes.Repeat([]byte{'x'}, i))
	}
	want := slices.Clone(names)
	slices.Sort(want)
	var got []string
	err := st.List(t.Context(), p, func(i Info) error {
		got = append(got, strings.TrimPrefix(i.Key, p))
		if n := slices.Index(names, strings.TrimPrefix(i.Key, p)); i.Size != int64(n) {
			t.Errorf("%s: size %d, want %d", i.Key, i.Size, n)
		}
		return nil
	})
	if err != nil || !slices.Equal(got, want) {
		t.Errorf("List = %q, %v; want %q", got, err, want)
	}
	for _, c := range []struct {
		prefix string
		want   []string
	}{
		{"a/", []string{"a/a-", "a/a/z", "a/b"}},
		{"a/a", []string{"a/a-", "a/a/z"}},
		{"a", []string{"a-c", "a.b", "a/a-", "a/a/z", "a/b", "a0", "ab"}},
		{"a.", []string{"a.b"}},
		{"b", []string{"b"}},
		{"zz", nil},
	} {
		got := keys(t, st, p+c.prefix)
		for i := range got {
			got[i] = strings.TrimPrefix(got[i], p)
		}
		if !slices.Equal(got, c.want) {
			t.Errorf("List %q = %q, want %q", c.prefix, got, c.want)
		}
	}
	stop := errors.New("stop")
	calls := 0
	err = st.List(t.Context(), p, func(Info) error {
		calls++
		if calls == 2 {
			return stop
		}
		return nil
	})
	if !errors.Is(err, stop) || calls != 2 {
		t.Errorf("List with fn stopping at 2: %v after %d calls", err, calls)
	}
	wantKind(t, st.List(t.Context(), "/x", func(Info) error { return nil }), beamledger.ErrInvalid, "List with a bad prefix")
}

// testMultipart uploads parts out of order and completes them in order.
func testMultipart(t *testing.T, st Store, p string) {
	ctx := t.Context()
	key := p + "mp"
	m := st.MinPartSize()
	part1, part2 := randomBytes(int(m), 6), []byte("tail")
	id, err := st.CreateMultipart(ctx, key)
	if err != nil {
		t.Fatal(err)
	}
	if ids := pending(t, st, p); !slices.Equal(ids, []string{id}) {
		t.Errorf("pending uploads %v, want [%s]", ids, id)
	}
	ups, _ := st.ListMultipart(ctx, p)
	if len(ups) == 1 && (ups[0].Key != key || ups[0].Initiated.IsZero()) {
		t.Errorf("pending upload %+v", ups[0])
	}
	p2, err := st.PutPart(ctx, key, id, 2, bytes.NewReader(part2), int64(len(part2)))
	if err != nil {
		t.Fatal(err)
	}
	p1, err := st.PutPart(ctx, key, id, 1, onlyReader{bytes.NewReader(part1)}, int64(len(part1)))
	if err != nil {
		t.Fatal(err)
	}
	if p1.Number != 1 || p1.Size != m || p1.ETag == "" || p2.Number != 2 || p2.Size != 4 {
		t.Errorf("parts %+v %+v", p1, p2)
	}
	if _, err := st.Stat(ctx, key); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("object visible before completion: %v", err)
	}
	info, err := st.CompleteMultipart(ctx, key, id, []Part{p1, p2}, PutOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if info.Size != m+4 {
		t.Errorf("completed size %d, want %d", info.Size, m+4)
	}
	if got := read(t, st, key, 0, -1); !bytes.Equal(got, append(slices.Clone(part1), part2...)) {
		t.Errorf("completed object differs (%d bytes)", len(got))
	}
	if ids := pending(t, st, p); len(ids) != 0 {
		t.Errorf("uploads pending after completion: %v", ids)
	}
}

// testMultipartRefusals: parts out of order, a wrong ETag, a part too small
// and no parts are all ErrInvalid, and leave the upload usable.
func testMultipartRefusals(t *testing.T, st Store, p string) {
	ctx := t.Context()
	key := p + "mp"
	m := st.MinPartSize()
	id, err := st.CreateMultipart(ctx, key)
	if err != nil {
		t.Fatal(err)
	}
	small := randomBytes(int(m-1), 7)
	p1, err := st.PutPart(ctx, key, id, 1, bytes.NewReader(small), int64(len(small)))
	if err != nil {
		t.Fatal(err)
	}
	p2, err := st.PutPart(ctx, key, id, 2, strings.NewReader("z"), 1)
	if err != nil {
		t.Fatal(err)
	}
	bad := p2
	bad.ETag = "0123456789abcdef0123456789abcdef"
	_, err = st.PutPart(ctx, key, id, 0, strings.NewReader("z"), 1)
	wantKind(t, err, beamledger.ErrInvalid, "PutPart number 0")
	for name, parts := range map[string][]Part{
		"out of order":     {p2, p1},
		"wrong ETag":       {p1, bad},
		"part 1 too small": {p1, p2},
		"none":             nil,
		"unknown part":     {{Number: 3, ETag: p2.ETag}},
	} {
		_, err := st.CompleteMultipart(ctx, key, id, parts, PutOptions{})
		wantKind(t, err, beamledger.ErrInvalid, "CompleteMultipart "+name)
	}
	// A part uploaded again replaces the first; then the upload completes.
	full := randomBytes(int(m), 8)
	p1, err = st.PutPart(ctx, key, id, 1, bytes.NewReader(full), int64(len(full)))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.CompleteMultipart(ctx, key, id, []Part{p1, p2}, PutOptions{}); err != nil {
		t.Fatalf("completing after the refusals: %v", err)
	}
	if got := read(t, st, key, 0, -1); !bytes.Equal(got, append(full, 'z')) {
		t.Errorf("completed object differs")
	}
}

func testMultipartAbort(t *testing.T, st Store, p string) {
	ctx := t.Context()
	key := p + "ab"
	id, err := st.CreateMultipart(ctx, key)
	if err != nil {
		t.Fatal(err)
	}
	other, err := st.CreateMultipart(ctx, p+"other")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.PutPart(ctx, key, id, 1, strings.NewReader("abc"), 3); err != nil {
		t.Fatal(err)
	}
	if ids := pending(t, st, p+"a"); !slices.Equal(ids, []string{id}) {
		t.Errorf("pending under %sa: %v, want [%s]", p, ids, id)
	}
	if err := st.AbortMultipart(ctx, key, id); err != nil {
		t.Fatal(err)
	}
	if ids := pending(t, st, p); !slices.Equal(ids, []string{other}) {
		t.Errorf("pending after abort: %v, want [%s]", ids, other)
	}
	if err := st.AbortMultipart(ctx, key, id); err != nil {
		t.Errorf("second abort: %v", err)
	}
	_, err = st.PutPart(ctx, key, id, 1, strings.NewReader("abc"), 3)
	wantKind(t, err, beamledger.ErrNotFound, "PutPart after abort")
	_, err = st.CompleteMultipart(ctx, key, id, []Part{{Number: 1, ETag: "x"}}, PutOptions{})
	wantKind(t, err, beamledger.ErrNotFound, "CompleteMultipart after abort")
	if _, err := st.Stat(ctx, key); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("an aborted upload left an object: %v", err)
	}
	if err := st.AbortMultipart(ctx, p+"other", other); err != nil {
		t.Fatal(err)
	}
}

func testNotFound(t *testing.T, st Store, p string) {
	ctx := t.Context()
	_, err := st.Stat(ctx, p+"missing")
	wantKind(t, err, beamledger.ErrNotFound, "Stat")
	_, err = st.Open(ctx, p+"missing", 0, -1)
	wantKind(t, err, beamledger.ErrNotFound, "Open")
	_, err = st.Open(ctx, p+"missing", 5, 0)
	wantKind(t, err, beamledger.ErrNotFound, "Open of no bytes")
	// A key below an object's key is no object either.
	put(t, st, p+"file", []byte("x"))
	_, err = st.Stat(ctx, p+"file/below")
	wantKind(t, err, beamledger.ErrNotFound, "Stat below an object")
	_, err = st.Stat(ctx, strings.TrimSuffix(p, "/"))
	wantKind(t, err, beamledger.ErrNotFound, "Stat of a prefix of objects")
	_, err = st.PutPart(ctx, p+"mp", "NOSUCHUPLOAD2345", 1, strings.NewReader("x"), 1)
	wantKind(t, err, beamledger.ErrNotFound, "PutPart to an unknown upload")
	if err := st.AbortMultipart(ctx, p+"mp", "NOSUCHUPLOAD2345"); err != nil {
		t.Errorf("AbortMultipart of an unknown upload: %v", err)
	}
}

func testBadKeys(t *testing.T, st Store, p string) {
	ctx := t.Context()
	bad := []string{
		"", "/" + p + "a", p + "a//b", p + "a/", p + "../x", p + "a/../b", p + ".hidden",
		p + "a/.b", p + "sp ace", p + "ü", p + "a\\b", p + "a?b",
		p + strings.Repeat("a", 1025), p + strings.Repeat("b", 256),
	}
	for _, k := range bad {
		_, err := st.Put(ctx, k, strings.NewReader("x"), 1, PutOptions{})
		wantKind(t, err, beamledger.ErrInvalid, "Put "+k)
		_, err = st.Stat(ctx, k)
		wantKind(t, err, beamledger.ErrInvalid, "Stat "+k)
		_, err = st.Open(ctx, k, 0, -1)
		wantKind(t, err, beamledger.ErrInvalid, "Open "+k)
		wantKind(t, st.Delete(ctx, k), beamledger.ErrInvalid, "Delete "+k)
		_, err = st.CreateMultipart(ctx, k)
		wantKind(t, err, beamledger.ErrInvalid, "CreateMultipart "+k)
	}
	put(t, st, p+"ok", []byte("x"))
	wantKind(t, st.Promote(ctx, p+"ok", p+"../escape"), beamledger.ErrInvalid, "Promote to a bad key")
	wantKind(t, st.Promote(ctx, p+"../ok", p+"ok2"), beamledger.ErrInvalid, "Promote from a bad key")
	if got := keys(t, st, p); !slices.Equal(got, []string{p + "ok"}) {
		t.Errorf("after the refusals the store holds %q", got)
	}
	// The longest allowed key works.
	long := p + strings.Repeat("k", maxSegmentLen) + "/" + strings.Repeat("l", 10)
	put(t, st, long, []byte("x"))
}
