package accounts

// Passwords are hashed with argon2id and stored as PHC strings, with the OWASP
// Password Storage Cheat Sheet parameters (m = 19456 KiB, t = 2, p = 1).
//
// The key derivation is golang.org/x/crypto/argon2, called directly; the PHC string is
// written and parsed here. github.com/alexedwards/argon2id v1.0.0 was considered for
// the encoding and comparison and set aside because its decoder trusts the stored
// string: tried against it, a hash with t=0, with p=0 or with an empty key panics in
// the comparison instead of returning an error, trailing text after a number
// ("p=1junk") is accepted, and no cost parameter is bounded, so one corrupt or
// imported row could make a login allocate gigabytes. Wrapping it safely means
// re-parsing every field first, after which it would only save a Sprintf.

import (
	"context"
	"crypto/rand"
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"fmt"
	"runtime"
	"strconv"
	"strings"
	"unicode/utf8"

	"golang.org/x/crypto/argon2"

	"beamledger"
)

// MinPasswordLength is the shortest password the policy accepts, in characters (runes).
// Length is what makes a password expensive to guess; composition rules mostly make
// people write predictable variations, so the policy has none.
const MinPasswordLength = 12

// MaxPasswordBytes bounds a password's size. Argon2 accepts any length, but an
// unbounded input lets one request make the server hash megabytes; 1024 bytes is far
// beyond any passphrase a person types.
const MaxPasswordBytes = 1024

// Bounds on the cost parameters of a hash this package will compute. A stored hash
// decides how much memory and time Verify spends, so without a ceiling the
// concurrency bound of PasswordHasher would not bound memory. The ceilings admit
// hashes several times costlier than the defaults, so stronger settings adopted
// later, or hashes imported from elsewhere, still verify and are re-hashed.
const (
	maxPasswordMemoryKiB  = 256 * 1024
	maxPasswordIterations = 16
	// RFC 9106 §3.1 asks for at least 8 bytes of salt.
	minPasswordSaltLen = 8
	maxPasswordSaltLen = 64
	// A key shorter than 16 bytes would make a chance match of a wrong password
	// conceivable; longer than 64 adds nothing.
	minPasswordKeyLen = 16
	maxPasswordKeyLen = 64
	// maxEncodedPasswordLen is longer than any string the bounds above allow, so
	// parsing can reject garbage before splitting it.
	maxEncodedPasswordLen = 256
)

// ErrMalformedPasswordHash reports a stored password hash that cannot be read. It is
// not a beamledger kind on purpose: the string comes from storage, not from the
// caller, so the caller did nothing wrong and the server should log it and answer
// with a generic internal error.
var ErrMalformedPasswordHash = errors.New("accounts: malformed password hash")

// PasswordParams are the argon2id cost parameters and sizes.
type PasswordParams struct {
	// MemoryKiB is the memory each hash fills, in KiB; it dominates the cost to an attacker.
	MemoryKiB uint32
	// Iterations is the number of passes over that memory.
	Iterations uint32
	// Parallelism is the number of lanes; it changes the result, so it is part of the hash.
	Parallelism uint8
	// SaltLen is the random salt's size in bytes.
	SaltLen uint32
	// KeyLen is the derived key's size in bytes.
	KeyLen uint32
}

// DefaultPasswordParams returns the OWASP Password Storage Cheat Sheet's argon2id
// setting: 19 MiB, two passes, one lane, a 16-byte salt and a 32-byte key. It costs
// tens of milliseconds per hash, which a login can afford and a guesser cannot.
func DefaultPasswordParams() PasswordParams {
	return PasswordParams{MemoryKiB: 19456, Iterations: 2, Parallelism: 1, SaltLen: 16, KeyLen: 32}
}

// Validate reports parameters this package refuses to hash with. Call it on
// parameters taken from configuration before NewPasswordHasher, which panics on them.
func (p PasswordParams) Validate() error {
	switch {
	case p.Iterations < 1 || p.Iterations > maxPasswordIterations:
		return fmt.Errorf("argon2 iterations %d outside 1..%d", p.Iterations, maxPasswordIterations)
	case p.Parallelism < 1:
		return errors.New("argon2 parallelism must be at least 1")
	// RFC 9106 §3.1: memory is at least 8 KiB per lane.
	case p.MemoryKiB < 8*uint32(p.Parallelism) || p.MemoryKiB > maxPasswordMemoryKiB:
		return fmt.Errorf("argon2 memory %d KiB outside %d..%d", p.MemoryKiB, 8*uint32(p.Parallelism), maxPasswordMemoryKiB)
	case p.SaltLen < minPasswordSaltLen || p.SaltLen > maxPasswordSaltLen:
		return fmt.Errorf("argon2 salt length %d outside %d..%d", p.SaltLen, minPasswordSaltLen, maxPasswordSaltLen)
	case p.KeyLen < minPasswordKeyLen || p.KeyLen > maxPasswordKeyLen:
		return fmt.Errorf("argon2 key length %d outside %d..%d", p.KeyLen, minPasswordKeyLen, maxPasswordKeyLen)
	}
	return nil
}

// PasswordHasher bounds how many hashes run at once so a login storm cannot exhaust
// memory (each takes ~19 MiB). Hash, Verify and DummyVerify all take a slot; a
// caller that cannot get one before its context ends is told to come back later
// rather than queueing without limit. It is safe for concurrent use.
type PasswordHasher struct {
	params PasswordParams
	// slots is a counting semaphore: a send takes a slot, a receive frees it.
	slots chan struct{}
	// dummy is a PHC string with the hasher's own parameters and a random key no
	// password matches, so DummyVerify runs exactly the code path of Verify.
	dummy string
}

// NewPasswordHasher returns a hasher using p that runs at most maxConcurrent hashes
// at once. maxConcurrent < 1 means runtime.GOMAXPROCS(0): hashing is CPU-bound, so
// more simultaneous hashes than cores would only add memory, not throughput.
// It panics if p.Validate fails, as a hasher with unusable parameters is a
// programming or configuration error that must stop start-up, not every login.
func NewPasswordHasher(p PasswordParams, maxConcurrent int) *PasswordHasher {
	if err := p.Validate(); err != nil {
		panic("accounts: NewPasswordHasher: " + err.Error())
	}
	if maxConcurrent < 1 {
		maxConcurrent = runtime.GOMAXPROCS(0)
	}
	return &PasswordHasher{
		params: p,
		slots:  make(chan struct{}, maxConcurrent),
		dummy:  encodePHC(p, randomBytes(p.SaltLen), randomBytes(p.KeyLen)),
	}
}

// Hash waits for a slot (honouring ctx; when ctx ends first return an error wrapping
// beamledger.ErrUnavailable) and returns a PHC string
// ($argon2id$v=19$m=…,t=…,p=…$salt$key, standard base64 without padding).
func (h *PasswordHasher) Hash(ctx context.Context, password string) (string, error) {
	salt := randomBytes(h.params.SaltLen)
	key, err := h.derive(ctx, password, salt, h.params)
	if err != nil {
		return "", err
	}
	return encodePHC(h.params, salt, key), nil
}

// Verify reports whether password matches encoded, and whether encoded used
// parameters other than the hasher's (so the caller re-hashes on login).
// needsRehash is only ever true together with ok, so a wrong password can never
// trigger a re-hash. A malformed encoded string gives an error wrapping
// ErrMalformedPasswordHash, never a panic; waiting for a slot is bounded by ctx as in Hash.
func (h *PasswordHasher) Verify(ctx context.Context, password, encoded string) (ok, needsRehash bool, err error) {
	stored, err := parsePHC(encoded)
	if err != nil {
		return false, false, err
	}
	key, err := h.derive(ctx, password, stored.salt, stored.params)
	if err != nil {
		return false, false, err
	}
	// Both keys have stored.params.KeyLen bytes, so the comparison's time does not
	// depend on where they first differ.
	if subtle.ConstantTimeCompare(key, stored.key) != 1 {
		return false, false, nil
	}
	return true, stored.params != h.params, nil
}

// DummyVerify spends the same work as a real Verify against a fixed hash, so that a
// login for an unknown email takes as long as one for a known email (timing side
// channel). It waits for a slot like Verify, since the point is to be
// indistinguishable from it, including under load.
func (h *PasswordHasher) DummyVerify(ctx context.Context, password string) {
	_, _, _ = h.Verify(ctx, password, h.dummy)
}

// derive computes the argon2id key while holding a slot.
func (h *PasswordHasher) derive(ctx context.Context, password string, salt []byte, p PasswordParams) ([]byte, error) {
	if err := h.acquire(ctx); err != nil {
		return nil, err
	}
	defer func() { <-h.slots }()
	return argon2.IDKey([]byte(password), salt, p.Iterations, p.MemoryKiB, p.Parallelism, p.KeyLen), nil
}

// acquire takes a slot or fails when ctx ends first. An already-ended context fails
// even when a slot is free: its caller has gone, so the work would be wasted.
func (h *PasswordHasher) acquire(ctx context.Context) error {
	if err := ctx.Err(); err != nil {
		return passwordBusy(err)
	}
	select {
	case h.slots <- struct{}{}:
		return nil
	case <-ctx.Done():
		return passwordBusy(ctx.Err())
	}
}

// passwordBusy wraps both the beamledger kind, which picks the HTTP status, and the
// context's error, so a caller can still tell a client that left from a timeout.
func passwordBusy(ctxErr error) error {
	return fmt.Errorf("%w: %w", beamledger.Unavailable("password checking is busy; try again shortly"), ctxErr)
}

// CheckPasswordPolicy returns a beamledger Invalid error naming field "password" when
// password is shorter than minLen runes, longer than MaxPasswordBytes bytes, or only
// whitespace. Length is counted in runes so that a passphrase in any script needs
// the same number of characters.
func CheckPasswordPolicy(password string, minLen int) error {
	switch {
	case password == "":
		return beamledger.InvalidField("password", "is required")
	case len(password) > MaxPasswordBytes:
		return beamledger.InvalidField("password", fmt.Sprintf("must be at most %d bytes", MaxPasswordBytes))
	case utf8.RuneCountInString(password) < minLen:
		return beamledger.InvalidField("password", fmt.Sprintf("must be at least %d characters", minLen))
	case strings.TrimSpace(password) == "":
		return beamledger.InvalidField("password", "must not be only whitespace")
	}
	return nil
}

// phcHash is a parsed argon2id PHC string.
type phcHash struct {
	params    PasswordParams
	salt, key []byte
}

// encodePHC writes the form the reference implementation writes, which parsePHC reads.
func encodePHC(p PasswordParams, salt, key []byte) string {
	return fmt.Sprintf("$argon2id$v=%d$m=%d,t=%d,p=%d$%s$%s", argon2.Version,
		p.MemoryKiB, p.Iterations, p.Parallelism,
		base64.RawStdEncoding.EncodeToString(salt), base64.RawStdEncoding.EncodeToString(key))
}

// parsePHC reads exactly the form the reference implementation writes for version
// 19 argon2id and rejects everything else, including values outside the bounds
// Validate enforces, because the parameters decide how much memory Verify spends.
func parsePHC(encoded string) (phcHash, error) {
	bad := func(reason string) (phcHash, error) {
		return phcHash{}, fmt.Errorf("%w: %s", ErrMalformedPasswordHash, reason)
	}
	if len(encoded) > maxEncodedPasswordLen {
		return bad("too long")
	}
	f := strings.Split(encoded, "$")
	if len(f) != 6 || f[0] != "" {
		return bad("want $argon2id$v=19$m=…,t=…,p=…$salt$key")
	}
	if f[1] != "argon2id" {
		return bad("variant is not argon2id")
	}
	if f[2] != "v="+strconv.Itoa(argon2.Version) {
		return bad("version is not 19")
	}
	var h phcHash
	var err error
	if h.params, err = parsePHCParams(f[3]); err != nil {
		return bad(err.Error())
	}
	// Strict rejects non-zero padding bits, so each hash has exactly one spelling.
	b64 := base64.RawStdEncoding.Strict()
	if h.salt, err = b64.DecodeString(f[4]); err != nil {
		return bad("salt is not unpadded standard base64")
	}
	if h.key, err = b64.DecodeString(f[5]); err != nil {
		return bad("key is not unpadded standard base64")
	}
	h.params.SaltLen, h.params.KeyLen = uint32(len(h.salt)), uint32(len(h.key))
	if err := h.params.Validate(); err != nil {
		return bad(err.Error())
	}
	return h, nil
}

// parsePHCParams reads "m=<KiB>,t=<passes>,p=<lanes>" in that order.
func parsePHCParams(s string) (PasswordParams, error) {
	parts := strings.Split(s, ",")
	if len(parts) != 3 {
		return PasswordParams{}, errors.New("want m=…,t=…,p=…")
	}
	var vals [3]uint64
	for i, name := range []string{"m", "t", "p"} {
		digits, ok := strings.CutPrefix(parts[i], name+"=")
		if !ok {
			return PasswordParams{}, errors.New("want m=…,t=…,p=…")
		}
		bits := 32
		if name == "p" {
			bits = 8
		}
		v, err := parsePHCDecimal(digits, bits)
		if err != nil {
			return PasswordParams{}, fmt.Errorf("%s: %w", name, err)
		}
		vals[i] = v
	}
	return PasswordParams{MemoryKiB: uint32(vals[0]), Iterations: uint32(vals[1]), Parallelism: uint8(vals[2])}, nil
}

// parsePHCDecimal accepts the PHC format's decimal: digits only, no sign, no leading zero.
func parsePHCDecimal(s string, bits int) (uint64, error) {
	if s == "" || strings.TrimLeft(s, "0123456789") != "" || (len(s) > 1 && s[0] == '0') {
		return 0, errors.New("not a plain decimal number")
	}
	v, err := strconv.ParseUint(s, 10, bits)
	if err != nil {
		return 0, errors.New("number out of range")
	}
	return v, nil
}

// randomBytes returns n bytes from crypto/rand. Since Go 1.24 its Read never returns
// an error (it crashes the program instead), so there is no error to pass on.
func randomBytes(n uint32) []byte {
	b := make([]byte, n)
	_, _ = rand.Read(b)
	return b
}
