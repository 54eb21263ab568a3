package objects

import (
	"bytes"
	"fmt"
	"io"
	"net"
	"strings"
	"sync"
	"sync/atomic"
	"testing"

	"github.com/minio/minio-go/v7"

	"beamledger"
)

// TestS3RefusesBytesChangedOnTheWay puts a proxy between the store and the
// harness's S3 server that, when told to, changes every 0xFF byte it passes
// towards the server into 0xFE (request heads are ASCII, so only bodies are
// touched). By default the store sends payloads unsigned, so the CRC32C it
// sends with every write is all that stands between such a change and a
// stored object; with SignPayload, the payload's signature is. Either way each
// way of writing must be refused with ErrUnavailable and leave nothing behind,
// while the same writes without 0xFF bytes pass through the same proxy intact.
func TestS3RefusesBytesChangedOnTheWay(t *testing.T) {
	for _, sign := range []bool{false, true} {
		t.Run(map[bool]string{false: "unsigned with CRC32C", true: "signed"}[sign], func(t *testing.T) {
			testChangedBytes(t, sign)
		})
	}
}

func testChangedBytes(t *testing.T, sign bool) {
	cfg := harnessS3Config(t)
	p := startFlipProxy(t, cfg.Endpoint)
	cfg.Endpoint, cfg.SignPayload = p.addr, sign
	st := newTestS3(t, cfg)
	ctx := t.Context()

	clean := func(n int, seed uint64) []byte {
		return bytes.ReplaceAll(randomBytes(n, seed), []byte{0xFF}, []byte{0x00})
	}
	marked := func(n int, seed uint64, at int) []byte {
		b := clean(n, seed)
		b[at] = 0xFF
		return b
	}
	small, large := 1000, 2*testPartSize+12345

	p.flip.Store(true)
	t.Run("clean bytes pass", func(t *testing.T) {
		for _, n := range []int{small, large} {
			data := clean(n, uint64(n))
			key := "clean/" + sha256Hex(data)
			put(t, st, key, data)
			if got := read(t, st, key, 0, -1); !bytes.Equal(got, data) {
				t.Errorf("%d bytes through the proxy came back different", n)
			}
		}
		data := clean(testPartSize, 7)
		id, err := st.CreateMultipart(ctx, "clean/parts")
		if err != nil {
			t.Fatal(err)
		}
		part, err := st.PutPart(ctx, "clean/parts", id, 1, onlyReader{bytes.NewReader(data)}, int64(len(data)))
		if err != nil {
			t.Fatalf("PutPart: %v", err)
		}
		if _, err := st.CompleteMultipart(ctx, "clean/parts", id, []Part{part}, PutOptions{}); err != nil {
			t.Fatalf("CompleteMultipart: %v", err)
		}
		if got := read(t, st, "clean/parts", 0, -1); !bytes.Equal(got, data) {
			t.Error("a part through the proxy came back different")
		}
		// Unsigned, the upload declared CRC32C, so the object carries the parts'
		// sums combined (S3's composite form: the sum of the sums, "-" and the
		// count); signed, it declared none.
		oi, err := st.client.StatObject(ctx, st.bucket, "clean/parts", minio.StatObjectOptions{Checksum: true})
		if composite := strings.HasSuffix(oi.ChecksumCRC32C, "-1"); err != nil || composite == sign {
			t.Errorf("the multipart object's CRC32C is %q (%v); signed %v", oi.ChecksumCRC32C, err, sign)
		}
	})
	t.Run("an upload begun without CRC32C", func(t *testing.T) {
		// As an earlier version began them, and one may still be open.
		id, err := st.core.NewMultipartUpload(ctx, st.bucket, "clean/older", minio.PutObjectOptions{})
		if err != nil {
			t.Fatal(err)
		}
		data := clean(testPartSize, 8)
		part, err := st.PutPart(ctx, "clean/older", id, 1, bytes.NewReader(data), int64(len(data)))
		if err != nil {
			t.Fatalf("PutPart: %v", err)
		}
		if _, err := st.CompleteMultipart(ctx, "clean/older", id, []Part{part}, PutOptions{}); err != nil {
			t.Fatalf("CompleteMultipart: %v", err)
		}
		if got := read(t, st, "clean/older", 0, -1); !bytes.Equal(got, data) {
			t.Error("the older upload's object came back different")
		}
	})
	if p.flipped.Load() != 0 {
		t.Fatalf("the proxy changed %d bytes of clean data", p.flipped.Load())
	}

	t.Run("a single PUT", func(t *testing.T) {
		data := marked(small, 1, small/2)
		_, err := st.Put(ctx, "changed/single", onlyReader{bytes.NewReader(data)}, int64(len(data)), PutOptions{})
		wantKind(t, err, beamledger.ErrUnavailable, "Put of changed bytes")
		_, err = st.Stat(ctx, "changed/single")
		wantKind(t, err, beamledger.ErrNotFound, "Stat after a refused Put")
	})
	t.Run("a multipart Put", func(t *testing.T) {
		// The change is in the second of three parts.
		data := marked(large, 2, testPartSize+100)
		_, err := st.Put(ctx, "changed/multipart", onlyReader{bytes.NewReader(data)}, int64(len(data)), PutOptions{})
		wantKind(t, err, beamledger.ErrUnavailable, "Put of changed bytes")
		_, err = st.Stat(ctx, "changed/multipart")
		wantKind(t, err, beamledger.ErrNotFound, "Stat after a refused Put")
		// minio-go aborts the refused upload, but the S3 server may still
		// finish writing a part it was receiving after the abort and so leave
		// an upload behind (seen once in 60 runs on a loaded machine): a stray
		// the server's sweep of old multipart uploads removes. It must not
		// have become an object.
		for _, id := range pending(t, st, "changed/multipart") {
			t.Logf("upload %s left by the S3 server after the abort", id)
		}
	})
	t.Run("a part", func(t *testing.T) {
		// A part that can seek has its sum sent ahead as a header; any other,
		// in a trailer after it.
		data := marked(testPartSize, 3, testPartSize-1)
		for _, body := range []io.Reader{onlyReader{bytes.NewReader(data)}, bytes.NewReader(data)} {
			id, err := st.CreateMultipart(ctx, "changed/part")
			if err != nil {
				t.Fatal(err)
			}
			_, err = st.PutPart(ctx, "changed/part", id, 1, body, int64(len(data)))
			wantKind(t, err, beamledger.ErrUnavailable, fmt.Sprintf("PutPart of changed bytes from a %T", body))
			if err := st.AbortMultipart(ctx, "changed/part", id); err != nil {
				t.Fatal(err)
			}
		}
	})
	if p.flipped.Load() == 0 {
		t.Fatal("the proxy changed no byte: the refusals above prove nothing")
	}
}

// flipProxy relays TCP connections to one address, changing 0xFF bytes sent
// towards it into 0xFE while flip is set.
type flipProxy struct {
	addr    string
	flip    atomic.Bool
	flipped atomic.Int64
}

func startFlipProxy(t *testing.T, target string) *flipProxy {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	p := &flipProxy{addr: ln.Addr().String()}
	var wg sync.WaitGroup
	var mu sync.Mutex
	var conns []net.Conn
	t.Cleanup(func() {
		ln.Close()
		mu.Lock()
		for _, c := range conns {
			c.Close()
		}
		mu.Unlock()
		wg.Wait()
	})
	wg.Go(func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			s, err := net.Dial("tcp", target)
			if err != nil {
				c.Close()
				continue
			}
			mu.Lock()
			conns = append(conns, c, s)
			mu.Unlock()
			wg.Go(func() { _, _ = io.Copy(c, s); c.Close() })
			wg.Go(func() { _, _ = io.Copy(s, p.reader(c)); s.Close() })
		}
	})
	return p
}

func (p *flipProxy) reader(r io.Reader) io.Reader {
	return readerFunc(func(b []byte) (int, error) {
		n, err := r.Read(b)
		if p.flip.Load() {
			for i, c := range b[:n] {
				if c == 0xFF {
					b[i] = 0xFE
					p.flipped.Add(1)
				}
			}
		}
		return n, err
	})
}
