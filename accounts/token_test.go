package accounts

import (
	"bytes"
	"encoding/base64"
	"encoding/hex"
	"strings"
	"testing"
)

func TestHashOpaqueTokenSHA256(t *testing.T) {
	// [published: FIPS 180-4 examples] SHA-256("abc")
	const want = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
	if got := hex.EncodeToString(HashOpaqueToken("abc")); got != want {
		t.Errorf("HashOpaqueToken(abc) = %s, want %s", got, want)
	}
}

func TestNewOpaqueToken(t *testing.T) {
	seen := map[string]bool{}
	for _, prefix := range []string{AgentTokenPrefix, RefreshTokenPrefix, AgentTokenPrefix} {
		plain, hash, err := NewOpaqueToken(prefix)
		if err != nil {
			t.Fatal(err)
		}
		secret, ok := strings.CutPrefix(plain, prefix+"_")
		if !ok || len(secret) != 43 {
			t.Fatalf("token %q: want %s_ and 43 characters", plain, prefix)
		}
		raw, err := base64.RawURLEncoding.DecodeString(secret)
		if err != nil || len(raw) != 32 {
			t.Errorf("token %q: random part is not 32 bytes of base64url: %v", plain, err)
		}
		if !bytes.Equal(hash, HashOpaqueToken(plain)) {
			t.Errorf("token %q: returned hash is not HashOpaqueToken of the plaintext", plain)
		}
		if got := TokenPrefix(plain); got != prefix {
			t.Errorf("TokenPrefix(%q) = %q, want %q", plain, got, prefix)
		}
		if seen[plain] {
			t.Errorf("token %q issued twice", plain)
		}
		seen[plain] = true
	}
}

func TestNewOpaqueTokenBadPrefix(t *testing.T) {
	for _, prefix := range []string{"", "bl_agent", "BLagent", "bl-agent", "blägent"} {
		if plain, _, err := NewOpaqueToken(prefix); err == nil {
			t.Errorf("NewOpaqueToken(%q) = %q, want an error", prefix, plain)
		}
	}
}

func TestTokenPrefix(t *testing.T) {
	cases := map[string]string{
		"blagent_abc":    "blagent",
		"blrefresh_abc":  "blrefresh",
		"blagent_a_b-c_": "blagent", // the random part may contain '_'
		"blagent":        "",
		"":               "",
		"_abc":           "",
	}
	for in, want := range cases {
		if got := TokenPrefix(in); got != want {
			t.Errorf("TokenPrefix(%q) = %q, want %q", in, got, want)
		}
	}
}
