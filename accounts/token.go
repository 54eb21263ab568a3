package accounts

import (
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"errors"
	"strings"
)

// Prefixes of the opaque tokens. The prefix lets the server route a presented token
// to the right store without a lookup, and lets a leaked token be recognised by
// secret scanners and by people reading a log.
const (
	// AgentTokenPrefix starts an instrument-agent token.
	AgentTokenPrefix = "blagent"
	// RefreshTokenPrefix starts a refresh token.
	RefreshTokenPrefix = "blrefresh"
)

// opaqueTokenBytes is the random part's size: 256 bits, beyond guessing, and since
// the hash is looked up directly, no stretching (as for passwords) is needed.
const opaqueTokenBytes = 32

// NewOpaqueToken returns a random token "<prefix>_<43 chars base64url of 32 random
// bytes>" and its storage hash. The plaintext is shown to its holder once; only the
// hash is kept. prefix must be lowercase ASCII letters and digits, so that
// TokenPrefix can find it again (the random part may itself contain '_').
func NewOpaqueToken(prefix string) (plaintext string, hash []byte, err error) {
	if prefix == "" || strings.TrimLeft(prefix, "abcdefghijklmnopqrstuvwxyz0123456789") != "" {
		return "", nil, errors.New("accounts: token prefix must be lowercase ASCII letters and digits")
	}
	secret := make([]byte, opaqueTokenBytes)
	if _, err := rand.Read(secret); err != nil {
		return "", nil, err
	}
	plaintext = prefix + "_" + base64.RawURLEncoding.EncodeToString(secret)
	return plaintext, HashOpaqueToken(plaintext), nil
}

// HashOpaqueToken is SHA-256 of the plaintext; tokens are stored only hashed, so a
// copy of the database does not hand out working credentials. The whole plaintext,
// prefix included, is hashed, so a token cannot be replayed under another prefix.
func HashOpaqueToken(plaintext string) []byte {
	sum := sha256.Sum256([]byte(plaintext))
	return sum[:]
}

// TokenPrefix returns the prefix before the first '_' (used to tell agent tokens
// "blagent" from refresh tokens "blrefresh"), or "" when there is no '_'.
func TokenPrefix(plaintext string) string {
	prefix, _, ok := strings.Cut(plaintext, "_")
	if !ok {
		return ""
	}
	return prefix
}
