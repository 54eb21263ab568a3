package server

import (
	"bytes"
	"context"
	"io"
	"net"
	"net/http"
	"os"
	"strings"
	"sync"
	"testing"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
	"beamledger/storage/objects"
	"beamledger/storage/objects/objectstest"
)

// outageProxy forwards TCP connections to an S3 server and can go down (refusing
// and cutting connections, as a stopped server would) and come back on the same
// address.
type outageProxy struct {
	t      *testing.T
	target string
	addr   string
	mu     sync.Mutex
	ln     net.Listener
	conns  map[net.Conn]bool
}

func newOutageProxy(t *testing.T, target string) *outageProxy {
	p := &outageProxy{t: t, target: target, conns: map[net.Conn]bool{}}
	p.up()
	t.Cleanup(p.down)
	return p
}

func (p *outageProxy) up() {
	addr := p.addr
	if addr == "" {
		addr = "127.0.0.1:0"
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		p.t.Fatal(err)
	}
	p.mu.Lock()
	p.ln, p.addr = ln, ln.Addr().String()
	p.mu.Unlock()
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go p.forward(c)
		}
	}()
}

func (p *outageProxy) forward(c net.Conn) {
	s, err := net.Dial("tcp", p.target)
	if err != nil {
		c.Close()
		return
	}
	p.mu.Lock()
	p.conns[c], p.conns[s] = true, true
	p.mu.Unlock()
	go func() { _, _ = io.Copy(s, c); s.Close() }()
	_, _ = io.Copy(c, s)
	c.Close()
}

// down closes the listener and every connection through it.
func (p *outageProxy) down() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.ln != nil {
		p.ln.Close()
		p.ln = nil
	}
	for c := range p.conns {
		c.Close()
	}
	p.conns = map[net.Conn]bool{}
}

// slowBody hands out size bytes a chunk at a time, calling halfway once it is half
// read, so that something can happen in the middle of an upload.
type slowBody struct {
	left, size int64
	halfway    func()
	once       sync.Once
}

func (b *slowBody) Read(p []byte) (int, error) {
	if b.left == 0 {
		return 0, io.EOF
	}
	if b.left <= b.size/2 {
		b.once.Do(b.halfway)
	}
	n := min(int64(len(p)), b.left, 1<<20)
	for i := range p[:n] {
		p[i] = byte(b.left - int64(i))
	}
	b.left -= n
	return int(n), nil
}

// TestObjectStoreOutage: when the S3 server goes away in the middle of an upload the
// client gets 503 with a clear message and nothing is recorded; bookings and other
// records keep working meanwhile; uploads work again once the server is back.
func TestObjectStoreOutage(t *testing.T) {
	w := newWorld(t)
	cfg := objectstest.Config(t)
	proxy := newOutageProxy(t, cfg.Endpoint)
	cfg.Endpoint = proxy.addr
	cfg.MaxAttempts = 2 // fail fast: the default keeps retrying for seconds
	cfg.PartSize = 5 << 20
	s3, err := objects.NewS3(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	w.srv.objects = s3
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	path := "/api/v1/files?acquisition_id=" + acq + "&name=scan.raw"
	upload := func(body io.Reader) response {
		req, _ := http.NewRequest(http.MethodPost, w.http.URL+path, body)
		req.Header.Set("Authorization", "Bearer "+researcher)
		req.Header.Set("Content-Type", "application/octet-stream")
		return w.send(req, nil)
	}

	// The store goes down halfway through a 24 MiB upload.
	r := upload(&slowBody{left: 24 << 20, size: 24 << 20, halfway: proxy.down})
	if r.StatusCode != http.StatusServiceUnavailable || r.errorCode() != "unavailable" || !contains(r.Body, "object store") {
		t.Fatalf("upload during the outage: %d %s", r.StatusCode, r.Body)
	}
	// Meanwhile everything that does not need the store works.
	start := w.nextTuesday(15, 0)
	w.qualify(w.users[accounts.RoleResearcher].ID, scheduling.LevelIndependent)
	if r := w.do(http.MethodPost, "/api/v1/bookings", researcher, w.bookingBody(start, start.Add(time.Hour), scheduling.KindIndependent), nil); r.StatusCode != http.StatusCreated {
		t.Errorf("booking during the outage: %d %s", r.StatusCode, r.Body)
	}
	if r := w.do(http.MethodGet, "/api/v1/acquisitions/"+acq, researcher, nil, nil); r.StatusCode != http.StatusOK {
		t.Errorf("reading an acquisition during the outage: %d", r.StatusCode)
	}
	if r := upload(bytes.NewReader([]byte("small"))); r.StatusCode != http.StatusServiceUnavailable {
		t.Errorf("a small upload during the outage: %d %s", r.StatusCode, r.Body)
	}
	var files struct{ Items []provenance.DataFile }
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/files?acquisition_id="+acq, researcher, nil, &files)
	if len(files.Items) != 0 {
		t.Errorf("the failed uploads left records: %+v", files.Items)
	}

	// The outage lasts BEAMLEDGER_FAULT_OUTAGE (make faults sets 60 s): requests keep
	// coming; those that need the store are 503, the others are served.
	hold := time.Duration(0)
	if v := os.Getenv("BEAMLEDGER_FAULT_OUTAGE"); v != "" {
		if hold, err = time.ParseDuration(v); err != nil {
			t.Fatalf("BEAMLEDGER_FAULT_OUTAGE=%q: %v", v, err)
		}
	}
	down := time.Now()
	refused, served := 0, 0
	for time.Since(down) < hold {
		if r := upload(bytes.NewReader([]byte("during"))); r.StatusCode != http.StatusServiceUnavailable {
			t.Fatalf("an upload %v into the outage: %d %s", time.Since(down).Round(time.Second), r.StatusCode, r.Body)
		}
		refused++
		if r := w.do(http.MethodGet, "/api/v1/acquisitions/"+acq, researcher, nil, nil); r.StatusCode != http.StatusOK {
			t.Fatalf("a read %v into the outage: %d", time.Since(down).Round(time.Second), r.StatusCode)
		}
		served++
		time.Sleep(time.Second)
	}

	// The store returns: uploads work again.
	proxy.up()
	back := time.Now()
	var f provenance.DataFile
	if r := w.upload(path, researcher, []byte("after the outage"), nil, &f); r.StatusCode != http.StatusCreated {
		t.Fatalf("upload after the outage: %d %s", r.StatusCode, r.Body)
	}
	if got := w.get("/api/v1/files/"+f.ID+"/content", researcher, nil); string(got.Body) != "after the outage" {
		t.Errorf("download after the outage: %d %q", got.StatusCode, got.Body)
	}
	t.Logf("figure: S3 server down for %v: %d more uploads answered 503, %d reads served meanwhile; the first upload after its return stored in %v",
		max(hold, time.Duration(0)).Round(time.Second), refused, served, time.Since(back).Round(time.Millisecond))
	// Nothing of the interrupted upload became an object: the bucket holds only the
	// stored file. Its parts could not be aborted while the store was away; they wait
	// under incoming/ for the cleanup of abandoned uploads.
	var keys []string
	if err := s3.List(context.Background(), "", func(i objects.Info) error { keys = append(keys, i.Key); return nil }); err != nil || len(keys) != 1 || keys[0] != f.ObjectKey {
		t.Errorf("objects after the outage: %v %v; want only %s", keys, err, f.ObjectKey)
	}
	ups, err := s3.ListMultipart(context.Background(), "")
	if err != nil {
		t.Fatal(err)
	}
	for _, u := range ups {
		if !strings.HasPrefix(u.Key, "incoming/") {
			t.Errorf("a pending upload outside incoming/: %+v", u)
		}
	}
}
