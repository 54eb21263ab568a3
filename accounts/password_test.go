package accounts

import (
	"context"
	"encoding/hex"
	"errors"
	"strings"
	"testing"
	"testing/synctest"
	"time"

	"beamledger"
)

// The reference strings below were computed with the reference Argon2 implementation's
// command-line tool, Debian package argon2 0~20171227-0.3+deb12u1, as
//
//	echo -n 'correct horse battery staple' | argon2 beamledgersalt16 -id -t 2 -k 19456 -p 1 -l 32 -e
//
// and the same with the changes noted beside each one. Without -e the tool also
// prints the raw key in hex (cliKeyHex).
const (
	cliPassword = "correct horse battery staple"
	cliSalt     = "beamledgersalt16" // 16 bytes, as the OWASP setting asks
	// [computed: reference Argon2 implementation CLI, Debian package argon2 0~20171227]
	cliOWASP  = "$argon2id$v=19$m=19456,t=2,p=1$YmVhbWxlZGdlcnNhbHQxNg$JUr+UbghLAGCwDDj8mow2rpsvH7k380M3NJumTTTFBk"
	cliKeyHex = "254afe51b8212c0182c030e3f26a30daba6cbc7ee4dfcd0cdcd26e9934d31419"
	// [computed: reference Argon2 implementation CLI, Debian package argon2 0~20171227] with -t 3 -k 65536 -p 4
	cliStronger = "$argon2id$v=19$m=65536,t=3,p=4$YmVhbWxlZGdlcnNhbHQxNg$hNHPUejl+kjt1sSLxejD/V/GrVkS3GKnvj+Tnyo25YA"
	// [computed: reference Argon2 implementation CLI, Debian package argon2 0~20171227] with -i instead of -id
	cliArgon2i = "$argon2i$v=19$m=19456,t=2,p=1$YmVhbWxlZGdlcnNhbHQxNg$naWAACJ1yySgtdbeO8oMlr/EangbZm7i/Sft2Guxzj8"
	// [computed: reference Argon2 implementation CLI, Debian package argon2 0~20171227] with -v 10
	cliV16 = "$argon2id$v=16$m=19456,t=2,p=1$YmVhbWxlZGdlcnNhbHQxNg$+f/6OQnBA8kZtjiNB0BuO2Bpg/fCvQnYbL3sRQTqouk"
)

// cheapParams keep the concurrency tests fast; they are still valid argon2id.
var cheapParams = PasswordParams{MemoryKiB: 64, Iterations: 1, Parallelism: 1, SaltLen: 16, KeyLen: 32}

func TestDefaultPasswordParamsAreOWASP(t *testing.T) {
	// [published: OWASP Password Storage Cheat Sheet] m = 19456 KiB, t = 2, p = 1,
	// 16-byte salt; the 32-byte key is the project's choice (REFERENCE.md §4).
	want := PasswordParams{MemoryKiB: 19456, Iterations: 2, Parallelism: 1, SaltLen: 16, KeyLen: 32}
	if got := DefaultPasswordParams(); got != want {
		t.Fatalf("DefaultPasswordParams() = %+v, want %+v", got, want)
	}
}

func TestPasswordHashRoundTrip(t *testing.T) {
	h := NewPasswordHasher(DefaultPasswordParams(), 2)
	ctx := t.Context()
	encoded, err := h.Hash(ctx, cliPassword)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(encoded, "$argon2id$v=19$m=19456,t=2,p=1$") {
		t.Errorf("Hash = %q, want the PHC prefix of the OWASP setting", encoded)
	}
	parsed, err := parsePHC(encoded)
	if err != nil {
		t.Fatalf("parsePHC(Hash()) = %v", err)
	}
	if parsed.params != DefaultPasswordParams() {
		t.Errorf("parsed params %+v, want %+v", parsed.params, DefaultPasswordParams())
	}
	ok, rehash, err := h.Verify(ctx, cliPassword, encoded)
	if err != nil || !ok || rehash {
		t.Errorf("Verify(right password) = %v, %v, %v; want true, false, nil", ok, rehash, err)
	}
	ok, rehash, err = h.Verify(ctx, cliPassword+" ", encoded)
	if err != nil || ok || rehash {
		t.Errorf("Verify(wrong password) = %v, %v, %v; want false, false, nil", ok, rehash, err)
	}
	again, err := h.Hash(ctx, cliPassword)
	if err != nil {
		t.Fatal(err)
	}
	if again == encoded {
		t.Error("two hashes of one password are equal; the salt is not random")
	}
	if n := len(h.slots); n != 0 {
		t.Errorf("%d slots still held after the calls returned", n)
	}
}

func TestPasswordVerifyReferenceCLI(t *testing.T) {
	h := NewPasswordHasher(DefaultPasswordParams(), 1)
	// [computed: reference Argon2 implementation CLI, Debian package argon2 0~20171227]
	// echo -n 'correct horse battery staple' | argon2 beamledgersalt16 -id -t 2 -k 19456 -p 1 -l 32 -e
	ok, rehash, err := h.Verify(t.Context(), cliPassword, cliOWASP)
	if err != nil || !ok || rehash {
		t.Errorf("Verify(reference hash) = %v, %v, %v; want true, false, nil", ok, rehash, err)
	}
	ok, _, err = h.Verify(t.Context(), "Correct horse battery staple", cliOWASP)
	if err != nil || ok {
		t.Errorf("Verify(wrong password, reference hash) = %v, %v; want false, nil", ok, err)
	}
}

func TestPasswordParseReferencePHC(t *testing.T) {
	// [computed: reference Argon2 implementation CLI, Debian package argon2 0~20171227]
	// the same command without -e prints the parameters and "Hash: <cliKeyHex>".
	got, err := parsePHC(cliOWASP)
	if err != nil {
		t.Fatal(err)
	}
	want := PasswordParams{MemoryKiB: 19456, Iterations: 2, Parallelism: 1, SaltLen: 16, KeyLen: 32}
	if got.params != want {
		t.Errorf("params = %+v, want %+v", got.params, want)
	}
	if string(got.salt) != cliSalt {
		t.Errorf("salt = %q, want %q", got.salt, cliSalt)
	}
	if hex.EncodeToString(got.key) != cliKeyHex {
		t.Errorf("key = %x, want %s", got.key, cliKeyHex)
	}
	// Encoding what was parsed gives back the reference string byte for byte.
	if back := encodePHC(got.params, got.salt, got.key); back != cliOWASP {
		t.Errorf("encodePHC = %q, want %q", back, cliOWASP)
	}
}

func TestPasswordNeedsRehash(t *testing.T) {
	h := NewPasswordHasher(DefaultPasswordParams(), 1)
	// [computed: reference Argon2 implementation CLI, Debian package argon2 0~20171227]
	// echo -n 'correct horse battery staple' | argon2 beamledgersalt16 -id -t 3 -k 65536 -p 4 -l 32 -e
	ok, rehash, err := h.Verify(t.Context(), cliPassword, cliStronger)
	if err != nil || !ok || !rehash {
		t.Errorf("Verify(other params) = %v, %v, %v; want true, true, nil", ok, rehash, err)
	}
	// A wrong password must never ask for a re-hash, or a guesser could overwrite it.
	ok, rehash, err = h.Verify(t.Context(), "not the password", cliStronger)
	if err != nil || ok || rehash {
		t.Errorf("Verify(wrong password, other params) = %v, %v, %v; want false, false, nil", ok, rehash, err)
	}
	// A different key length alone also counts as different parameters.
	h16 := NewPasswordHasher(PasswordParams{MemoryKiB: 19456, Iterations: 2, Parallelism: 1, SaltLen: 16, KeyLen: 16}, 1)
	if ok, rehash, err := h16.Verify(t.Context(), cliPassword, cliOWASP); err != nil || !ok || !rehash {
		t.Errorf("Verify(other key length) = %v, %v, %v; want true, true, nil", ok, rehash, err)
	}
}

func TestPasswordVerifyMalformed(t *testing.T) {
	const salt, key = "YmVhbWxlZGdlcnNhbHQxNg", "JUr+UbghLAGCwDDj8mow2rpsvH7k380M3NJumTTTFBk"
	withParams := func(params string) string { return "$argon2id$v=19$" + params + "$" + salt + "$" + key }
	cases := map[string]string{
		"empty":               "",
		"argon2i variant":     cliArgon2i,
		"argon2d variant":     strings.Replace(cliOWASP, "argon2id", "argon2d", 1),
		"version 16":          cliV16,
		"no version":          "$argon2id$m=19456,t=2,p=1$" + salt + "$" + key,
		"version with suffix": strings.Replace(cliOWASP, "v=19", "v=19x", 1),
		"missing key":         "$argon2id$v=19$m=19456,t=2,p=1$" + salt,
		"extra field":         cliOWASP + "$abc",
		"no leading dollar":   cliOWASP[1:],
		"bad base64 salt":     "$argon2id$v=19$m=19456,t=2,p=1$YmVhbWxl*GdlcnNhbHQxNg$" + key,
		"bad base64 key":      "$argon2id$v=19$m=19456,t=2,p=1$" + salt + "$JUr+UbghLAGCwDDj8mow2rpsvH7k380M3NJumTTTFB!",
		"padded base64":       "$argon2id$v=19$m=19456,t=2,p=1$YmVhbWxlZGdlcnNhbHQxNg==$" + key,
		"url-safe base64":     "$argon2id$v=19$m=19456,t=2,p=1$" + salt + "$" + strings.ReplaceAll(key, "+", "-"),
		"params out of order": withParams("t=2,m=19456,p=1"),
		"missing param":       withParams("m=19456,t=2"),
		"extra param":         withParams("m=19456,t=2,p=1,k=1"),
		"trailing junk":       withParams("m=19456,t=2,p=1junk"),
		"leading zero":        withParams("m=019456,t=2,p=1"),
		"plus sign":           withParams("m=+19456,t=2,p=1"),
		"parallelism > 255":   withParams("m=19456,t=2,p=256"),
		"zero iterations":     withParams("m=19456,t=0,p=1"),
		"zero parallelism":    withParams("m=19456,t=2,p=0"),
		"memory < 8 per lane": withParams("m=31,t=2,p=4"),
		"memory over bound":   withParams("m=4294967295,t=2,p=1"),
		"iterations too many": withParams("m=19456,t=1000000,p=1"),
		"empty key":           "$argon2id$v=19$m=19456,t=2,p=1$" + salt + "$",
		"8-byte key":          "$argon2id$v=19$m=19456,t=2,p=1$" + salt + "$JUr+UbghLAE",
		"4-byte salt":         "$argon2id$v=19$m=19456,t=2,p=1$YmVhbQ$" + key,
		"far too long":        cliOWASP + strings.Repeat("A", 1000),
	}
	h := NewPasswordHasher(DefaultPasswordParams(), 1)
	for name, encoded := range cases {
		t.Run(name, func(t *testing.T) {
			ok, rehash, err := h.Verify(t.Context(), cliPassword, encoded)
			if !errors.Is(err, ErrMalformedPasswordHash) || ok || rehash {
				t.Errorf("Verify(%q) = %v, %v, %v; want false, false, ErrMalformedPasswordHash", encoded, ok, rehash, err)
			}
		})
	}
}

func TestPasswordParamsValidate(t *testing.T) {
	if err := DefaultPasswordParams().Validate(); err != nil {
		t.Errorf("default params: %v", err)
	}
	bad := []PasswordParams{
		{MemoryKiB: 19456, Iterations: 0, Parallelism: 1, SaltLen: 16, KeyLen: 32},
		{MemoryKiB: 19456, Iterations: 2, Parallelism: 0, SaltLen: 16, KeyLen: 32},
		{MemoryKiB: 7, Iterations: 2, Parallelism: 1, SaltLen: 16, KeyLen: 32},
		{MemoryKiB: 19456, Iterations: 2, Parallelism: 1, SaltLen: 4, KeyLen: 32},
		{MemoryKiB: 19456, Iterations: 2, Parallelism: 1, SaltLen: 16, KeyLen: 0},
	}
	for _, p := range bad {
		if p.Validate() == nil {
			t.Errorf("Validate(%+v) = nil, want an error", p)
		}
	}
	defer func() {
		if recover() == nil {
			t.Error("NewPasswordHasher with zero iterations did not panic")
		}
	}()
	NewPasswordHasher(bad[0], 1)
}

// The concurrency tests run in a synctest bubble: synctest.Wait returns only once
// every goroutine in the bubble is blocked, so "still waiting for a slot" is an
// observed fact rather than a guess after a sleep, and deadlines fire on the
// bubble's fake clock.

func TestPasswordHasherWaitsForSlot(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		h := NewPasswordHasher(cheapParams, 1)
		encoded, err := h.Hash(t.Context(), cliPassword)
		if err != nil {
			t.Fatal(err)
		}
		h.slots <- struct{}{} // another hash holds the only slot
		type result struct {
			ok  bool
			err error
		}
		done := make(chan result, 1)
		go func() {
			ok, _, err := h.Verify(t.Context(), cliPassword, encoded)
			done <- result{ok, err}
		}()
		synctest.Wait()
		select {
		case r := <-done:
			t.Fatalf("Verify finished while the only slot was held: %+v", r)
		default:
		}
		<-h.slots // the other hash finishes
		if r := <-done; r.err != nil || !r.ok {
			t.Errorf("Verify after the slot freed = %+v; want ok", r)
		}
	})
}

func TestPasswordHasherDeadlineWhileSlotHeld(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		h := NewPasswordHasher(cheapParams, 1)
		h.slots <- struct{}{}
		const timeout = 2 * time.Second
		ctx, cancel := context.WithTimeout(t.Context(), timeout)
		defer cancel()
		start := time.Now()
		_, err := h.Hash(ctx, cliPassword)
		if !errors.Is(err, beamledger.ErrUnavailable) || !errors.Is(err, context.DeadlineExceeded) {
			t.Errorf("Hash with the slot held = %v; want ErrUnavailable and DeadlineExceeded", err)
		}
		// The fake clock shows it waited for the deadline instead of giving up at once.
		if waited := time.Since(start); waited != timeout {
			t.Errorf("Hash returned after %v, want %v", waited, timeout)
		}
	})
}

func TestPasswordHasherCancelWhileWaiting(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		h := NewPasswordHasher(cheapParams, 1)
		h.slots <- struct{}{}
		ctx, cancel := context.WithCancel(t.Context())
		done := make(chan error, 1)
		go func() {
			_, _, err := h.Verify(ctx, cliPassword, cliOWASP)
			done <- err
		}()
		synctest.Wait()
		cancel()
		err := <-done
		if !errors.Is(err, beamledger.ErrUnavailable) || !errors.Is(err, context.Canceled) {
			t.Errorf("Verify cancelled while waiting = %v; want ErrUnavailable and Canceled", err)
		}
		if n := len(h.slots); n != 1 {
			t.Errorf("%d slots held, want only the one the test took", n)
		}
	})
}

func TestPasswordHasherBoundIsCount(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		h := NewPasswordHasher(cheapParams, 2)
		h.slots <- struct{}{}
		// One of two slots is taken: a hash goes ahead.
		if _, err := h.Hash(t.Context(), cliPassword); err != nil {
			t.Fatalf("Hash with a free slot: %v", err)
		}
		h.slots <- struct{}{}
		// Both are taken: it must wait until the context ends.
		ctx, cancel := context.WithTimeout(t.Context(), time.Second)
		defer cancel()
		if _, err := h.Hash(ctx, cliPassword); !errors.Is(err, beamledger.ErrUnavailable) {
			t.Errorf("Hash with both slots held = %v; want ErrUnavailable", err)
		}
	})
}

func TestPasswordHasherEndedContext(t *testing.T) {
	h := NewPasswordHasher(cheapParams, 1)
	ctx, cancel := context.WithCancel(t.Context())
	cancel()
	// A free slot but a caller that has gone: no work is started.
	if _, err := h.Hash(ctx, cliPassword); !errors.Is(err, beamledger.ErrUnavailable) {
		t.Errorf("Hash(ended ctx) = %v; want ErrUnavailable", err)
	}
}

func TestDummyVerify(t *testing.T) {
	h := NewPasswordHasher(DefaultPasswordParams(), 1)
	// Same work as Verify means the same parameters as the hashes this hasher writes.
	dummy, err := parsePHC(h.dummy)
	if err != nil {
		t.Fatalf("dummy hash does not parse: %v", err)
	}
	if dummy.params != h.params {
		t.Errorf("dummy params %+v, want the hasher's %+v", dummy.params, h.params)
	}
	// No password matches it, not even an empty one.
	for _, pw := range []string{"", cliPassword} {
		if ok, _, err := h.Verify(t.Context(), pw, h.dummy); ok || err != nil {
			t.Errorf("Verify(%q, dummy) = %v, %v; want false, nil", pw, ok, err)
		}
	}
	synctest.Test(t, func(t *testing.T) {
		h := NewPasswordHasher(cheapParams, 1)
		h.slots <- struct{}{}
		done := make(chan struct{})
		go func() {
			h.DummyVerify(t.Context(), cliPassword)
			close(done)
		}()
		synctest.Wait()
		select {
		case <-done:
			t.Fatal("DummyVerify finished while the only slot was held; it must queue like Verify")
		default:
		}
		<-h.slots
		<-done
	})
}

func TestCheckPasswordPolicy(t *testing.T) {
	cases := []struct {
		password string
		minLen   int
		ok       bool
	}{
		{"", MinPasswordLength, false},
		{"", 0, false},
		{"elevenchars", MinPasswordLength, false},
		{"twelve chars", MinPasswordLength, true},
		// Counted in runes: 11 two-byte runes are 22 bytes but too short,
		{strings.Repeat("é", 11), MinPasswordLength, false},
		// and 12 are enough.
		{strings.Repeat("é", 12), MinPasswordLength, true},
		{strings.Repeat("a", MaxPasswordBytes), MinPasswordLength, true},
		{strings.Repeat("a", MaxPasswordBytes+1), MinPasswordLength, false},
		// 512 two-byte runes are 1024 bytes; one more passes in runes but not in bytes.
		{strings.Repeat("é", 513), MinPasswordLength, false},
		{strings.Repeat(" ", 20), MinPasswordLength, false},
		{" \t\n\u00a0\u2003 \t\n\u00a0\u2003 \t\n", MinPasswordLength, false},
		{"  padded password  ", MinPasswordLength, true},
		{"short", 4, true},
	}
	for _, c := range cases {
		err := CheckPasswordPolicy(c.password, c.minLen)
		if c.ok {
			if err != nil {
				t.Errorf("CheckPasswordPolicy(%q, %d) = %v, want nil", c.password, c.minLen, err)
			}
			continue
		}
		var e *beamledger.Error
		if !errors.As(err, &e) || !errors.Is(err, beamledger.ErrInvalid) || e.Fields["password"] == "" {
			t.Errorf("CheckPasswordPolicy(%q, %d) = %v, want Invalid naming password", c.password, c.minLen, err)
		}
	}
}
