package server

import (
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/base64"
	"errors"
	"fmt"
	"time"

	"github.com/golang-jwt/jwt/v5"
	"github.com/google/uuid"
)

// accessTokenType is the JWT "typ" of access tokens (RFC 9068 §2.1), checked on every
// request so that no other kind of JWT signed with the same key passes (RFC 8725 §3.11).
const accessTokenType = "at+jwt"

// accessClaims are the claims of an access token.
type accessClaims struct {
	jwt.RegisteredClaims
	// TokenVersion is the user's token version when issued; a password change or
	// disabling moves it on and so invalidates the token at once.
	TokenVersion int64 `json:"tv"`
}

// tokenSigner issues and verifies access tokens. One algorithm (EdDSA with Ed25519),
// one signing key, several verification keys for rotation, each found by its kid.
type tokenSigner struct {
	key      ed25519.PrivateKey
	kid      string
	verify   map[string]ed25519.PublicKey
	issuer   string
	audience string
	ttl      time.Duration
	parser   *jwt.Parser
	// now is the clock the parser checks times against.
	now func() time.Time
	// verified remembers tokens already verified, until they expire.
	verified *verifiedTokens
}

// tokenLeeway is the clock skew allowed between servers when checking exp, nbf and
// iat. Processes behind one load balancer must take each other's tokens while
// their clocks disagree by a few minutes (a host whose time service failed): three
// minutes, under the five that Kerberos allows by default [practice]. It lengthens
// a token's life by as much; sign-out and password changes end tokens through the
// token version, not through exp.
const tokenLeeway = 3 * time.Minute

func newTokenSigner(c Config, now func() time.Time) *tokenSigner {
	s := &tokenSigner{
		key:      c.SigningKey,
		kid:      keyID(c.SigningKey.Public().(ed25519.PublicKey)),
		verify:   map[string]ed25519.PublicKey{},
		issuer:   c.Issuer,
		audience: c.Audience,
		ttl:      c.AccessTTL,
		now:      now,
		verified: newVerifiedTokens(),
	}
	s.verify[s.kid] = c.SigningKey.Public().(ed25519.PublicKey)
	for _, k := range c.VerifyKeys {
		s.verify[keyID(k)] = k
	}
	// RFC 8725 §3.1-3.10: allow-list the algorithm; require and check iss, aud, exp.
	s.parser = jwt.NewParser(
		jwt.WithValidMethods([]string{jwt.SigningMethodEdDSA.Alg()}),
		jwt.WithIssuer(c.Issuer),
		jwt.WithAudience(c.Audience),
		jwt.WithExpirationRequired(),
		jwt.WithIssuedAt(),
		jwt.WithLeeway(tokenLeeway),
		jwt.WithTimeFunc(now),
	)
	return s
}

// keyID is the RFC 7638 JWK thumbprint of an Ed25519 public key (members crv, kty, x
// in lexicographic order, RFC 8037 §2), so a kid names its key without configuration.
func keyID(pub ed25519.PublicKey) string {
	jwk := fmt.Sprintf(`{"crv":"Ed25519","kty":"OKP","x":"%s"}`, base64.RawURLEncoding.EncodeToString(pub))
	sum := sha256.Sum256([]byte(jwk))
	return base64.RawURLEncoding.EncodeToString(sum[:])
}

// issue signs an access token for a user.
func (s *tokenSigner) issue(userID string, tokenVersion int64, now time.Time) (string, error) {
	claims := accessClaims{
		RegisteredClaims: jwt.RegisteredClaims{
			Issuer:    s.issuer,
			Subject:   userID,
			Audience:  jwt.ClaimStrings{s.audience},
			IssuedAt:  jwt.NewNumericDate(now),
			NotBefore: jwt.NewNumericDate(now),
			ExpiresAt: jwt.NewNumericDate(now.Add(s.ttl)),
			ID:        uuid.NewString(),
		},
		TokenVersion: tokenVersion,
	}
	t := jwt.NewWithClaims(jwt.SigningMethodEdDSA, claims)
	t.Header["kid"] = s.kid
	t.Header["typ"] = accessTokenType
	return t.SignedString(s.key)
}

var errTokenType = errors.New("token is not an access token")

// parse verifies a token and returns its claims, which the caller must not change. kid
// is only a lookup key into the configured keys: jku, x5u and jwk headers are never
// followed (RFC 8725 §3.10). A token verified before is answered from s.verified
// while a full verification would still pass.
func (s *tokenSigner) parse(raw string) (*accessClaims, error) {
	now := s.now()
	if claims, ok := s.verified.get(raw, now); ok {
		return claims, nil
	}
	claims, err := s.verifyFull(raw)
	if err != nil {
		return nil, err
	}
	s.verified.put(raw, claims, tokenLeeway, now)
	return claims, nil
}

// verifyFull checks a token in full.
func (s *tokenSigner) verifyFull(raw string) (*accessClaims, error) {
	var claims accessClaims
	_, err := s.parser.ParseWithClaims(raw, &claims, func(t *jwt.Token) (any, error) {
		if typ, _ := t.Header["typ"].(string); typ != accessTokenType {
			return nil, errTokenType
		}
		kid, _ := t.Header["kid"].(string)
		key, ok := s.verify[kid]
		if !ok {
			return nil, fmt.Errorf("unknown key id")
		}
		return key, nil
	})
	if err != nil {
		return nil, err
	}
	if claims.Subject == "" || claims.TokenVersion < 1 {
		return nil, errors.New("token lacks a subject or version")
	}
	return &claims, nil
}
