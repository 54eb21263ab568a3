package server

import (
	"bufio"
	"bytes"
	"context"
	"fmt"
	"io"
	"net"
	"net/http"
	"runtime"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"beamledger/accounts"
)

// TestHugeBodiesAndPages: a 10 MiB JSON body is refused with 413 before it is
// read whole, and every listing refuses a page or span beyond its cap, naming the
// parameter, instead of answering an unbounded list.
func TestHugeBodiesAndPages(t *testing.T) {
	w := newWorld(t)
	token := w.tokens[accounts.RoleManager]
	body := append([]byte(`{"instrument_id":"`+w.instr.ID+`","note":"`), bytes.Repeat([]byte("a"), 10<<20)...)
	body = append(body, `"}`...)
	req, _ := http.NewRequest(http.MethodPost, w.http.URL+"/api/v1/bookings", bytes.NewReader(body))
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("Authorization", "Bearer "+token)
	if r := rawDo(t, w, req); r.StatusCode != http.StatusRequestEntityTooLarge || r.errorCode() != "too_large" {
		t.Errorf("10 MiB JSON body: %d %s", r.StatusCode, r.Body)
	}
	t.Logf("figure: a 10 MiB JSON body is answered 413 (limit %d bytes)", w.srv.cfg.MaxBodyBytes)
	for path, field := range map[string]string{
		"/api/v1/files?limit=100000000":                                      "limit",
		"/api/v1/acquisitions?limit=100000000":                               "limit",
		"/api/v1/ledger/checkpoints?limit=1000000":                           "limit",
		"/api/v1/bookings?from=2020-01-01T00:00:00Z&to=2030-01-01T00:00:00Z": "to",
	} {
		r := w.get(path, token, nil)
		if r.StatusCode != http.StatusBadRequest || !fieldNamed(r, field) {
			t.Errorf("GET %s: %d %s; want 400 naming %s", path, r.StatusCode, r.Body, field)
		}
	}
	t.Logf("figure: page sizes above 1,000 (files, checkpoints), 500 (acquisitions) and booking spans above 62 days are refused with 400 naming the parameter")
}

// TestSlowHeadersDropped: a client that opens a connection and sends its headers
// too slowly is cut off by the header timeout, and the server goes on answering
// others meanwhile.
func TestSlowHeadersDropped(t *testing.T) {
	w := newWorld(t)
	w.srv.cfg.ReadHeaderTimeout = time.Second
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- w.srv.Serve(ctx, ln) }()
	t.Cleanup(func() { cancel(); <-done })
	addr := ln.Addr().String()

	conns := make([]net.Conn, 0, 20)
	for range 20 {
		c, err := net.Dial("tcp", addr)
		if err != nil {
			t.Fatal(err)
		}
		conns = append(conns, c)
		fmt.Fprint(c, "GET /healthz HTTP/1.1\r\nHost: slow.example\r\nX-Slow: ") // and never more
	}
	t0 := time.Now()
	// Others are served while the slow ones hang.
	res, err := http.Get("http://" + addr + "/healthz")
	if err != nil || res.StatusCode != http.StatusOK {
		t.Fatalf("a normal request beside the slow ones: %v %v", res, err)
	}
	res.Body.Close()
	var worst time.Duration
	for _, c := range conns {
		_ = c.SetReadDeadline(time.Now().Add(10 * time.Second))
		// The server closes the connection (perhaps after a 408): the read ends.
		_, err := io.ReadAll(bufio.NewReader(c))
		if ne, ok := err.(net.Error); ok && ne.Timeout() {
			t.Fatal("a slow-headers connection was still open after 10 s")
		}
		worst = max(worst, time.Since(t0))
		c.Close()
	}
	if worst > 5*time.Second {
		t.Errorf("slow-headers connections dropped only after %v (header timeout 1 s)", worst)
	}
	t.Logf("figure: 20 slow-headers connections dropped %v after they stalled (header timeout 1 s); other requests answered meanwhile", worst.Round(10*time.Millisecond))
}

// TestLoginStormBoundedMemory: 300 logins at once, right and wrong passwords for
// existing and unknown accounts, leave the heap bounded by the password hashes
// allowed at once (each argon2id hash holds about 19 MiB), not by the number of
// requests (300 unbounded hashes would take 5.6 GiB); every answer is 200, 401 or
// 429.
func TestLoginStormBoundedMemory(t *testing.T) {
	w := newWorld(t)
	client := w.http.Client()
	client.Transport.(*http.Transport).MaxIdleConnsPerHost = 300
	runtime.GC()
	var base runtime.MemStats
	runtime.ReadMemStats(&base)
	var peak atomic.Uint64
	stop := make(chan struct{})
	sampled := make(chan struct{})
	go func() {
		defer close(sampled)
		var m runtime.MemStats
		for {
			select {
			case <-stop:
				return
			case <-time.After(2 * time.Millisecond):
			}
			runtime.ReadMemStats(&m)
			if m.HeapInuse > peak.Load() {
				peak.Store(m.HeapInuse)
			}
		}
	}()
	var wg sync.WaitGroup
	var mu sync.Mutex
	statuses := map[int]int{}
	t0 := time.Now()
	for i := range 300 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			email, pw := "researcher@test.example", testPassword
			switch i % 3 {
			case 1:
				pw = "wrong " + testPassword
			case 2:
				email = fmt.Sprintf("nobody%d@test.example", i)
			}
			req, _ := http.NewRequest(http.MethodPost, w.http.URL+"/api/v1/auth/login",
				bytes.NewReader([]byte(`{"email":"`+email+`","password":"`+pw+`"}`)))
			req.Header.Set("Content-Type", "application/json")
			res, err := client.Do(req)
			if err != nil {
				t.Error(err)
				return
			}
			_, _ = io.Copy(io.Discard, res.Body)
			res.Body.Close()
			mu.Lock()
			statuses[res.StatusCode]++
			mu.Unlock()
		}()
	}
	wg.Wait()
	took := time.Since(t0)
	close(stop)
	<-sampled
	for st := range statuses {
		if st != http.StatusOK && st != http.StatusUnauthorized && st != http.StatusTooManyRequests {
			t.Errorf("login storm: %d answers with status %d", statuses[st], st)
		}
	}
	growth := float64(peak.Load()-min(peak.Load(), base.HeapInuse)) / (1 << 20)
	// Live: the hashes running (19 MiB each) and one finishing. The collector lets
	// the heap reach twice the live data before it runs (GOGC=100), and its pacing
	// overshoots under a burst of 19 MiB allocations: the bound allows twice that
	// again, plus slack for 300 requests' buffers. Unbounded, 300 hashes at once
	// would hold 5.6 GiB.
	bound := 4*float64(w.srv.cfg.HashConcurrency+1)*19 + 32
	if growth > bound {
		t.Errorf("heap grew %.0f MiB during the storm; bound %.0f MiB (hash concurrency %d)", growth, bound, w.srv.cfg.HashConcurrency)
	}
	t.Logf("figure: 300 concurrent logins answered in %v with statuses %v; peak heap growth %.0f MiB (bound %.0f MiB)", took.Round(10*time.Millisecond), statuses, growth, bound)
}
