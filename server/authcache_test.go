package server

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"beamledger/accounts"
)

func TestAuthCacheReusesForgetsAndExpires(t *testing.T) {
	loads := 0
	version := int64(1)
	load := func(context.Context, string) (accounts.AuthState, error) {
		loads++
		return accounts.AuthState{Role: accounts.RoleStaff, TokenVersion: version}, nil
	}
	ctx := context.Background()
	c := newAuthCache(50 * time.Millisecond)
	for i := 0; i < 3; i++ {
		if st, _ := c.state(ctx, "u", load); st.TokenVersion != 1 {
			t.Fatalf("state %+v", st)
		}
	}
	if loads != 1 {
		t.Fatalf("%d loads for three reads inside the TTL, want 1", loads)
	}
	version = 2
	c.forget("u")
	if st, _ := c.state(ctx, "u", load); st.TokenVersion != 2 || loads != 2 {
		t.Fatalf("after forget: %+v, %d loads", st, loads)
	}
	version = 3
	time.Sleep(60 * time.Millisecond) // past the TTL: the next read goes to storage
	if st, _ := c.state(ctx, "u", load); st.TokenVersion != 3 || loads != 3 {
		t.Fatalf("after the TTL: %+v, %d loads", st, loads)
	}
	off := newAuthCache(0)
	off.state(ctx, "u", load)
	off.state(ctx, "u", load)
	if loads != 5 {
		t.Fatalf("a zero TTL cached: %d loads", loads)
	}
}

// TestAuthCacheSharesReadsInFlight: requests missing together share one read; a
// forget during the read makes later requests read anew and keeps the older state
// out of the cache; a failed read is not shared.
func TestAuthCacheSharesReadsInFlight(t *testing.T) {
	ctx := context.Background()
	c := newAuthCache(time.Minute)
	var mu sync.Mutex
	loads := 0
	gate := make(chan struct{})
	version := int64(1)
	load := func(context.Context, string) (accounts.AuthState, error) {
		mu.Lock()
		loads++
		v := version
		mu.Unlock()
		<-gate
		return accounts.AuthState{Role: accounts.RoleStaff, TokenVersion: v}, nil
	}
	const n = 16
	var wg sync.WaitGroup
	got := make([]int64, n)
	for i := 0; i < n; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			st, err := c.state(ctx, "u", load)
			if err != nil {
				t.Error(err)
			}
			got[i] = st.TokenVersion
		}()
	}
	waitFor(t, func() bool { mu.Lock(); defer mu.Unlock(); return loads == 1 })
	time.Sleep(20 * time.Millisecond) // let the others join the read
	close(gate)
	wg.Wait()
	if loads != 1 {
		t.Fatalf("%d loads for %d requests missing together, want 1", loads, n)
	}
	for i, v := range got {
		if v != 1 {
			t.Fatalf("request %d saw version %d", i, v)
		}
	}

	// A change forgotten during a read: the read's state is not kept.
	c.forget("u")
	gate = make(chan struct{})
	done := make(chan accounts.AuthState)
	go func() { st, _ := c.state(ctx, "u", load); done <- st }()
	waitFor(t, func() bool { mu.Lock(); defer mu.Unlock(); return loads == 2 })
	mu.Lock()
	version = 2
	mu.Unlock()
	c.forget("u")
	close(gate)
	if st := <-done; st.TokenVersion != 1 {
		t.Fatalf("the read begun before the change saw %d", st.TokenVersion)
	}
	if st, _ := c.state(ctx, "u", load); st.TokenVersion != 2 || loads != 3 {
		t.Fatalf("after a forget during a read: %+v, %d loads", st, loads)
	}

	// A failed read is not shared: a request that waited for it reads for itself.
	c.forget("u")
	fail := make(chan struct{})
	failing := func(context.Context, string) (accounts.AuthState, error) {
		<-fail
		return accounts.AuthState{}, errors.New("cancelled")
	}
	errc := make(chan error)
	go func() { _, err := c.state(ctx, "u", failing); errc <- err }()
	waitFor(t, func() bool { c.mu.Lock(); defer c.mu.Unlock(); return c.loading["u"] != nil })
	joined := make(chan accounts.AuthState)
	gate = make(chan struct{})
	close(gate)
	go func() { st, _ := c.state(ctx, "u", load); joined <- st }()
	time.Sleep(20 * time.Millisecond)
	close(fail)
	if err := <-errc; err == nil {
		t.Fatal("the failing read reported no error")
	}
	if st := <-joined; st.TokenVersion != 2 {
		t.Fatalf("after a failed shared read: %+v", st)
	}
}

func waitFor(t *testing.T, ok func() bool) {
	t.Helper()
	for deadline := time.Now().Add(5 * time.Second); !ok(); time.Sleep(time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatal("timed out")
		}
	}
}
