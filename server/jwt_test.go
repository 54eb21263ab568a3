package server

import (
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/ed25519"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/rsa"
	"crypto/x509"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"encoding/pem"
	"io"
	"log/slog"
	"maps"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/golang-jwt/jwt/v5"
	"github.com/google/uuid"

	"beamledger/accounts"
)

// The JWT tests follow RFC 8725 (JWT Best Current Practices): every token below is
// a valid researcher token with one thing changed, and each must be refused with 401.
// TestJWTTestTokensAreValid shows the unchanged tokens pass, so a refusal is due to
// the change and nothing else.

// jwtB64 is the JWS segment encoding: base64url without padding (RFC 7515 §2).
func jwtB64(b []byte) string { return base64.RawURLEncoding.EncodeToString(b) }

// jwtSegment encodes a header or claims object as a JWS segment.
func jwtSegment(t *testing.T, v map[string]any) string {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return jwtB64(b)
}

// decodeJWT splits a compact JWS into its header, claims and signature.
func decodeJWT(t *testing.T, raw string) (header, claims map[string]any, sig []byte) {
	t.Helper()
	parts := strings.Split(raw, ".")
	if len(parts) != 3 {
		t.Fatalf("token has %d parts", len(parts))
	}
	dec := func(s string, v any) {
		b, err := base64.RawURLEncoding.DecodeString(s)
		if err != nil {
			t.Fatal(err)
		}
		d := json.NewDecoder(bytes.NewReader(b))
		d.UseNumber() // keep exp and tv exactly as issued
		if err := d.Decode(v); err != nil {
			t.Fatal(err)
		}
	}
	dec(parts[0], &header)
	dec(parts[1], &claims)
	sig, err := base64.RawURLEncoding.DecodeString(parts[2])
	if err != nil {
		t.Fatal(err)
	}
	return header, claims, sig
}

// handJWT builds a compact JWS by hand, for what golang-jwt refuses to produce.
// sign gets the signing input; nil leaves the signature empty.
func handJWT(t *testing.T, header, claims map[string]any, sign func(input []byte) []byte) string {
	t.Helper()
	input := jwtSegment(t, header) + "." + jwtSegment(t, claims)
	var sig []byte
	if sign != nil {
		sig = sign([]byte(input))
	}
	return input + "." + jwtB64(sig)
}

// libJWT signs claims with golang-jwt; header entries other than alg are set as given.
func libJWT(t *testing.T, method jwt.SigningMethod, key any, header, claims map[string]any) string {
	t.Helper()
	tok := jwt.NewWithClaims(method, jwt.MapClaims(maps.Clone(claims)))
	for k, v := range header {
		if k != "alg" {
			tok.Header[k] = v
		}
	}
	s, err := tok.SignedString(key)
	if err != nil {
		t.Fatalf("sign with %s: %v", method.Alg(), err)
	}
	return s
}

// jwtParts is a valid access token of the researcher taken apart: the header and
// claims the server wrote, to be changed one at a time and signed again.
type jwtParts struct {
	header map[string]any
	claims map[string]any
	kid    string
}

func researcherJWT(t *testing.T, w *world) jwtParts {
	t.Helper()
	h, c, _ := decodeJWT(t, w.tokens[accounts.RoleResearcher])
	for _, k := range []string{"alg", "typ", "kid"} {
		if _, ok := h[k]; !ok {
			t.Fatalf("issued token lacks header %s: %v", k, h)
		}
	}
	for _, k := range []string{"iss", "aud", "sub", "exp", "tv"} {
		if _, ok := c[k]; !ok {
			t.Fatalf("issued token lacks claim %s: %v", k, c)
		}
	}
	return jwtParts{header: h, claims: c, kid: h["kid"].(string)}
}

// jwtWith returns a copy of m with the given entries set; a nil value deletes the entry.
func jwtWith(m map[string]any, kv ...any) map[string]any {
	out := maps.Clone(m)
	for i := 0; i+1 < len(kv); i += 2 {
		k := kv[i].(string)
		if kv[i+1] == nil {
			delete(out, k)
		} else {
			out[k] = kv[i+1]
		}
	}
	return out
}

// expectUnauthorized checks GET /api/v1/me refuses the token as RFC 8725 asks.
func expectUnauthorized(t *testing.T, w *world, token string) {
	t.Helper()
	res := w.do(http.MethodGet, "/api/v1/me", token, nil, nil)
	if res.StatusCode != http.StatusUnauthorized || res.errorCode() != "unauthorized" {
		t.Errorf("GET /api/v1/me: %d %s, want 401 unauthorized", res.StatusCode, res.Body)
	}
}

// expectMe checks the token is accepted as the researcher.
func expectMe(t *testing.T, w *world, token string) {
	t.Helper()
	var me accounts.User
	res := w.do(http.MethodGet, "/api/v1/me", token, nil, &me)
	if res.StatusCode != http.StatusOK || me.ID != w.users[accounts.RoleResearcher].ID {
		t.Errorf("GET /api/v1/me: %d %s, want 200 as the researcher", res.StatusCode, res.Body)
	}
}

// edSigner signs a JWS signing input with an Ed25519 key.
func edSigner(key ed25519.PrivateKey) func([]byte) []byte {
	return func(in []byte) []byte { return ed25519.Sign(key, in) }
}

func TestJWTTestTokensAreValid(t *testing.T) {
	w := newWorld(t)
	p := researcherJWT(t, w)
	expectMe(t, w, w.tokens[accounts.RoleResearcher])
	expectMe(t, w, libJWT(t, jwt.SigningMethodEdDSA, w.key, p.header, p.claims))
	expectMe(t, w, handJWT(t, p.header, p.claims, edSigner(w.key)))
	// The header the server writes (RFC 9068 §2.1 typ; RFC 7638 thumbprint as kid).
	if p.header["alg"] != "EdDSA" || p.header["typ"] != "at+jwt" || p.kid != keyID(w.key.Public().(ed25519.PublicKey)) {
		t.Errorf("issued header %v", p.header)
	}
}

func TestJWTRefusals(t *testing.T) {
	w := newWorld(t)
	p := researcherJWT(t, w)
	h, c := p.header, p.claims
	serverPub := w.key.Public().(ed25519.PublicKey)

	_, attacker, err := ed25519.GenerateKey(nil)
	if err != nil {
		t.Fatal(err)
	}
	attackerPub := attacker.Public().(ed25519.PublicKey)
	attackerKid := keyID(attackerPub)
	rsaKey, err := rsa.GenerateKey(rand.Reader, 2048)
	if err != nil {
		t.Fatal(err)
	}
	ecKey, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	pubDER, err := x509.MarshalPKIXPublicKey(serverPub)
	if err != nil {
		t.Fatal(err)
	}
	pubPEM := pem.EncodeToMemory(&pem.Block{Type: "PUBLIC KEY", Bytes: pubDER})
	valid := libJWT(t, jwt.SigningMethodEdDSA, w.key, h, c)
	parts := strings.Split(valid, ".")
	manager := w.users[accounts.RoleManager].ID

	// A server that records every request: a token naming it must not make us call it.
	var hits atomic.Int64
	lure := httptest.NewServer(http.HandlerFunc(func(rw http.ResponseWriter, r *http.Request) {
		hits.Add(1)
		rw.Header().Set("Content-Type", "application/json")
		_ = json.NewEncoder(rw).Encode(map[string]any{"keys": []any{map[string]any{"kty": "OKP", "crv": "Ed25519", "kid": attackerKid, "x": jwtB64(attackerPub)}}})
	}))
	t.Cleanup(lure.Close)

	cases := []struct {
		name  string
		token string
	}{
		// RFC 8725 §2.1, §3.1: "none" is never accepted, in any spelling.
		{"alg none, empty signature", handJWT(t, jwtWith(h, "alg", "none"), c, nil)},
		{"alg noNE, empty signature", handJWT(t, jwtWith(h, "alg", "noNE"), c, nil)},
		{"alg NONE, empty signature", handJWT(t, jwtWith(h, "alg", "NONE"), c, nil)},
		{"alg none from the library", libJWT(t, jwt.SigningMethodNone, jwt.UnsafeAllowNoneSignatureType, h, c)},
		{"alg none with the EdDSA signature kept", handJWT(t, jwtWith(h, "alg", "none"), c, edSigner(w.key))},
		{"alg missing", handJWT(t, jwtWith(h, "alg", nil), c, edSigner(w.key))},
		// RFC 8725 §3.1: one algorithm allowed.
		{"HS256 with a secret", libJWT(t, jwt.SigningMethodHS256, []byte("a secret the attacker chose, 32 bytes+"), h, c)},
		{"RS256 with a fresh RSA key", libJWT(t, jwt.SigningMethodRS256, rsaKey, h, c)},
		{"ES256 with a fresh P-256 key", libJWT(t, jwt.SigningMethodES256, ecKey, h, c)},
		{"Ed25519 signature labelled ES256", handJWT(t, jwtWith(h, "alg", "ES256"), c, edSigner(w.key))},
		// RFC 8725 §2.1: key confusion, the public key used as an HMAC secret.
		{"HS256 keyed with the server's public key bytes", libJWT(t, jwt.SigningMethodHS256, []byte(serverPub), h, c)},
		{"HS256 keyed with the server's public key PEM", libJWT(t, jwt.SigningMethodHS256, pubPEM, h, c)},
		{"EdDSA signed by another key under the server's kid", libJWT(t, jwt.SigningMethodEdDSA, attacker, h, c)},
		// RFC 8725 §3.9, §3.10: exp, iss and aud required and checked.
		{"exp missing", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "exp", nil))},
		{"exp long past", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "exp", w.clock.Now().Add(-time.Hour).Unix()))},
		{"exp not a number", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "exp", "never"))},
		{"iss wrong", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "iss", "https://attacker.example"))},
		{"iss missing", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "iss", nil))},
		{"aud wrong", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "aud", []string{"another-api"}))},
		{"aud wrong, as a string", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "aud", "another-api"))},
		{"aud missing", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "aud", nil))},
		{"nbf in the future", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "nbf", w.clock.Now().Add(time.Hour).Unix()))},
		{"iat in the future", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "iat", w.clock.Now().Add(time.Hour).Unix()))},
		// Integrity.
		{"payload changed, signature kept", parts[0] + "." + jwtSegment(t, jwtWith(c, "sub", manager)) + "." + parts[2]},
		{"signature altered", parts[0] + "." + parts[1] + "." + flipFirstByte(t, parts[2])},
		{"signature cut", parts[0] + "." + parts[1] + "." + parts[2][:40]},
		{"signature dropped", parts[0] + "." + parts[1] + "."},
		// RFC 8725 §3.10: kid is only a lookup key.
		{"kid unknown", libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(h, "kid", "no-such-key"), c)},
		{"kid of a key not configured", libJWT(t, jwt.SigningMethodEdDSA, attacker, jwtWith(h, "kid", attackerKid), c)},
		{"kid a path", libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(h, "kid", "../../../../dev/null"), c)},
		{"kid missing", libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(h, "kid", nil), c)},
		{"kid empty", libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(h, "kid", ""), c)},
		// RFC 8725 §3.11: explicit typing.
		{"typ JWT", libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(h, "typ", "JWT"), c)},
		{"typ missing", libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(h, "typ", nil), c)},
		{"typ of an ID token", libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(h, "typ", "id+jwt"), c)},
		// RFC 8725 §3.10 (and RFC 7515 §4.1.2-4.1.5): never fetch or trust keys the token names.
		{"jku to an attacker key set", libJWT(t, jwt.SigningMethodEdDSA, attacker, jwtWith(h, "kid", attackerKid, "jku", lure.URL+"/jwks.json"), c)},
		{"x5u to an attacker certificate", libJWT(t, jwt.SigningMethodEdDSA, attacker, jwtWith(h, "kid", attackerKid, "x5u", lure.URL+"/cert.pem"), c)},
		{"jku and the server's kid", libJWT(t, jwt.SigningMethodEdDSA, attacker, jwtWith(h, "jku", lure.URL+"/jwks.json"), c)},
		{"jwk embedding the signing attacker key", libJWT(t, jwt.SigningMethodEdDSA, attacker,
			jwtWith(h, "kid", attackerKid, "jwk", map[string]any{"kty": "OKP", "crv": "Ed25519", "x": jwtB64(attackerPub)}), c)},
		{"jwk embedding the attacker key, no kid", libJWT(t, jwt.SigningMethodEdDSA, attacker,
			jwtWith(h, "kid", nil, "jwk", map[string]any{"kty": "OKP", "crv": "Ed25519", "x": jwtB64(attackerPub)}), c)},
		// Subject and token version.
		{"sub of no user", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "sub", uuid.NewString()))},
		{"sub not an id", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "sub", "admin"))},
		{"sub missing", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "sub", nil))},
		{"tv missing", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "tv", nil))},
		{"tv zero", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "tv", 0))},
		{"tv ahead of the user's", libJWT(t, jwt.SigningMethodEdDSA, w.key, h, jwtWith(c, "tv", 99))},
		// Shape.
		{"two segments", parts[0] + "." + parts[1]},
		{"four segments", valid + "." + parts[2]},
		{"header not JSON", jwtB64([]byte("{alg:EdDSA")) + "." + parts[1] + "." + parts[2]},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) { expectUnauthorized(t, w, tc.token) })
	}
	if n := hits.Load(); n != 0 {
		t.Errorf("the server fetched a key URL from a token header %d times", n)
	}
}

// flipFirstByte changes the first signature byte (the last base64url character may
// carry only padding bits, so changing it could leave the bytes as they were).
func flipFirstByte(t *testing.T, seg string) string {
	t.Helper()
	b, err := base64.RawURLEncoding.DecodeString(seg)
	if err != nil {
		t.Fatal(err)
	}
	b[0] ^= 0x01
	return jwtB64(b)
}

// TestJWTExpiryLeeway: an access token is accepted up to the leeway after exp (clock
// skew between servers) and not after.
func TestJWTExpiryLeeway(t *testing.T) {
	w := newWorld(t)
	tok := w.tokens[accounts.RoleResearcher]
	_, c, _ := decodeJWT(t, tok)
	exp, err := c["exp"].(json.Number).Int64()
	if err != nil {
		t.Fatal(err)
	}
	w.clock.Advance(time.Unix(exp, 0).Sub(w.clock.Now()) + tokenLeeway - time.Second)
	expectMe(t, w, tok)
	w.clock.Advance(2 * time.Second) // exp + the leeway + 1 s
	expectUnauthorized(t, w, tok)
}

// TestJWTTokenVersion: a token carries the user's token version, and once a password
// reset moves the version on, tokens with the old one are refused.
func TestJWTTokenVersion(t *testing.T) {
	w := newWorld(t)
	p := researcherJWT(t, w)
	id := w.users[accounts.RoleResearcher].ID
	st, err := w.db.AuthState(context.Background(), id)
	if err != nil {
		t.Fatal(err)
	}
	if got, _ := p.claims["tv"].(json.Number).Int64(); got != st.TokenVersion {
		t.Fatalf("token tv %d, user's version %d", got, st.TokenVersion)
	}
	if r := w.do(http.MethodPost, "/api/v1/users/"+id+"/password", w.tokens[accounts.RoleManager],
		map[string]string{"new_password": "a reset passphrase of length"}, nil); r.StatusCode != http.StatusNoContent {
		t.Fatalf("reset: %d %s", r.StatusCode, r.Body)
	}
	after, err := w.db.AuthState(context.Background(), id)
	if err != nil || after.TokenVersion == st.TokenVersion {
		t.Fatalf("version after reset: %d, %v; want it moved on from %d", after.TokenVersion, err, st.TokenVersion)
	}
	expectUnauthorized(t, w, w.tokens[accounts.RoleResearcher])
	expectUnauthorized(t, w, libJWT(t, jwt.SigningMethodEdDSA, w.key, p.header, jwtWith(p.claims, "tv", st.TokenVersion)))
	// The same token with the current version passes: the version alone made the difference.
	expectMe(t, w, libJWT(t, jwt.SigningMethodEdDSA, w.key, p.header, jwtWith(p.claims, "tv", after.TokenVersion)))
}

// alsoServe starts a second server over the same database and clock, and returns a
// world whose requests go to it.
func alsoServe(t *testing.T, w *world, cfg Config) *world {
	t.Helper()
	srv, err := New(cfg, w.db, slog.New(slog.NewJSONHandler(io.Discard, nil)), w.clock.Now)
	if err != nil {
		t.Fatal(err)
	}
	w2 := *w
	w2.srv, w2.http = srv, httptest.NewServer(srv.Handler())
	t.Cleanup(w2.http.Close)
	return &w2
}

// TestJWTRotationKey: after the signing key is replaced, tokens signed by the old key
// keep working while the old public key is among VerifyKeys, and only then.
func TestJWTRotationKey(t *testing.T) {
	w := newWorld(t)
	oldToken := w.tokens[accounts.RoleResearcher]
	oldPub := w.key.Public().(ed25519.PublicKey)
	_, newKey, err := ed25519.GenerateKey(nil)
	if err != nil {
		t.Fatal(err)
	}

	rotating := w.srv.cfg
	rotating.SigningKey = newKey
	rotating.VerifyKeys = []ed25519.PublicKey{oldPub}
	rw := alsoServe(t, w, rotating)
	expectMe(t, rw, oldToken)
	// A token the new server issues is signed by the new key under the new kid.
	fresh := rw.login(w.users[accounts.RoleResearcher].Email, testPassword).AccessToken
	expectMe(t, rw, fresh)
	if h, _, _ := decodeJWT(t, fresh); h["kid"] != keyID(newKey.Public().(ed25519.PublicKey)) {
		t.Errorf("new token kid %v, want the new key's", h["kid"])
	}
	// kid selects the key: the old key's signature under the new key's kid fails.
	p := researcherJWT(t, w)
	expectUnauthorized(t, rw, libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(p.header, "kid", keyID(newKey.Public().(ed25519.PublicKey))), p.claims))
	// A verify key verifies only: a token it signed under its kid is accepted, but
	// that is all it is (it was the old signing key).
	expectMe(t, rw, libJWT(t, jwt.SigningMethodEdDSA, w.key, jwtWith(p.header, "kid", keyID(oldPub)), p.claims))

	rotated := w.srv.cfg
	rotated.SigningKey = newKey
	rotated.VerifyKeys = nil
	expectUnauthorized(t, alsoServe(t, w, rotated), oldToken)
}

func TestKeyIDIsRFC8037Thumbprint(t *testing.T) {
	// The example key of RFC 8037 Appendix A.1 is the RFC 8032 §7.1 test 1 key.
	pub, err := hex.DecodeString("d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a")
	if err != nil {
		t.Fatal(err)
	}
	// [published: RFC 8037 Appendix A.3 — memory]
	const want = "kPrK_qmxVWaYVA9wwBF6Iuo3vVzz7TxHCTwXBygrS4k"
	if got := keyID(pub); got != want {
		t.Errorf("keyID = %s, want %s", got, want)
	}
}

// TestEd25519RFC8032Test1: the Ed25519 the tokens are signed with is RFC 8032's
// (pure Ed25519, not Ed25519ph or Ed25519ctx), through golang-jwt as the server uses it.
func TestEd25519RFC8032Test1(t *testing.T) {
	// [published: RFC 8032 §7.1 test 1] secret key, public key and signature of the empty message.
	const (
		secretHex = "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"
		publicHex = "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
		sigHex    = "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b"
	)
	seed, err := hex.DecodeString(secretHex)
	if err != nil {
		t.Fatal(err)
	}
	key := ed25519.NewKeyFromSeed(seed)
	if got := hex.EncodeToString(key.Public().(ed25519.PublicKey)); got != publicHex {
		t.Errorf("public key %s, want %s", got, publicHex)
	}
	if got := hex.EncodeToString(ed25519.Sign(key, nil)); got != sigHex {
		t.Errorf("crypto/ed25519 signature %s, want %s", got, sigHex)
	}
	sig, err := jwt.SigningMethodEdDSA.Sign("", key)
	if err != nil {
		t.Fatal(err)
	}
	if got := hex.EncodeToString(sig); got != sigHex {
		t.Errorf("golang-jwt EdDSA signature %s, want %s", got, sigHex)
	}
}
