package server

import (
	"context"
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
