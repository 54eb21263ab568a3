package server

import (
	"bytes"
	"crypto/ed25519"
	"crypto/x509"
	"encoding/base64"
	"encoding/hex"
	"encoding/pem"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/url"
	"regexp"
	"strings"
	"time"

	"beamledger/accounts"
	"beamledger/provenance"
)

// Config is everything the server needs, filled once from flags and BEAMLEDGER_*
// environment variables by cmd/beamledger. Defaults() gives a working base;
// Validate() refuses weak or missing secrets and impossible settings.
type Config struct {
	DatabaseURL string
	// DatabaseReplicaURL, when set, names a read replica (a streaming hot standby of
	// the primary) that the read-only report routes read instead of the primary:
	// utilization, cost recovery and fair share. Everything else, every write and
	// every read that must see the caller's own write, stays on the primary. While
	// the replica is down those reports answer 503 and readiness says so without
	// failing.
	DatabaseReplicaURL string
	ListenAddr         string

	// JWT: access tokens are signed with SigningKey (Ed25519, the only algorithm
	// accepted) and verified with it or any of VerifyKeys (keys being rotated out).
	SigningKey ed25519.PrivateKey
	VerifyKeys []ed25519.PublicKey
	Issuer     string
	Audience   string
	AccessTTL  time.Duration
	RefreshTTL time.Duration

	// Objects: where data files go. "disk" (ObjectDir) or "s3".
	ObjectStore string
	ObjectDir   string
	S3          S3Config
	// MaxFileBytes bounds one data file; large four-dimensional scans reach hundreds of GB.
	MaxFileBytes int64
	// ObjectRetention, when set and the store supports object locking, protects each
	// data file's object in governance mode for this long after its upload.
	ObjectRetention time.Duration
	// UploadExpiry is how long a resumable upload may sit idle before the cleanup
	// discards its parts and its pending record.
	UploadExpiry time.Duration

	MaxBodyBytes      int64
	ReadHeaderTimeout time.Duration
	ReadTimeout       time.Duration
	WriteTimeout      time.Duration
	IdleTimeout       time.Duration
	ShutdownTimeout   time.Duration

	// HashConcurrency bounds simultaneous argon2id computations (~19 MiB each).
	HashConcurrency int
	// MinPasswordLength is accounts.MinPasswordLength outside demo mode.
	MinPasswordLength int
	// LoginPerAccount and LoginPerAddress throttle failed sign-ins.
	LoginPerAccount accounts.ThrottleRule
	LoginPerAddress accounts.ThrottleRule
	// AuthCacheTTL is how long a process may reuse a user's account state (role,
	// disabled, token version) before reading it again; changes made through the same
	// process apply at once. 0 reads it on every request.
	AuthCacheTTL time.Duration
	// TrustProxyHeaders takes the client address from X-Forwarded-For; enable only
	// behind a proxy that sets it.
	TrustProxyHeaders bool

	// LedgerKey signs the ledger's checkpoints (Ed25519). Run refuses to start
	// without it; it should not be the JWT key, whose rotation would then orphan
	// every checkpoint's signature.
	LedgerKey ed25519.PrivateKey
	// LedgerOrigin names the ledger in its checkpoints and is the signing key's name:
	// a schema-less URL unique to the facility, e.g. "ledger.facility.example.org".
	LedgerOrigin string
	// LedgerSealInterval is how often each process seals committed ledger events,
	// which bounds how long an event stays unsealed.
	LedgerSealInterval time.Duration
	// JobInterval is how often each process looks for no-shows and lapsed waitlist
	// offers (the jobs take turns through row locks, so each is done once).
	JobInterval time.Duration
	// LedgerCheckpointRetention, when set, publishes every checkpoint the sealer
	// signs to the object store as well (ledger/checkpoints/…), protected in
	// compliance mode for this long where the store locks objects: a copy of the
	// signed roots that nobody with database access can rewrite.
	LedgerCheckpointRetention time.Duration

	// MetricsListen, when set, is a separate host:port answering GET /metrics in the
	// Prometheus text format; empty serves no metrics. MetricsToken, when set, is the
	// bearer token a scrape must present there.
	MetricsListen string
	MetricsToken  string

	// Demo marks the embedded demo: weaker password rule, demo accounts printed.
	Demo     bool
	LogLevel slog.Level
}

// S3Config locates an S3-compatible object store.
type S3Config struct {
	Endpoint  string
	Region    string
	Bucket    string
	AccessKey string
	SecretKey string
	UseTLS    bool
	PathStyle bool
	// SignPayload signs payloads instead of sending them with a CRC32C, for
	// S3 servers that take no checksums (objects.S3Config.SignPayload).
	SignPayload bool
	// CreateBucket creates the bucket on first use when it is missing; ObjectLock
	// creates it with object locking, which retention needs.
	CreateBucket bool
	ObjectLock   bool
}

// Defaults returns the configuration used when nothing is set.
func Defaults() Config {
	return Config{
		ListenAddr:         "127.0.0.1:8080",
		Issuer:             "beamledger",
		Audience:           "beamledger-api",
		AccessTTL:          15 * time.Minute,
		RefreshTTL:         30 * 24 * time.Hour,
		ObjectStore:        "disk",
		ObjectDir:          ".data/objects",
		MaxFileBytes:       2 << 40,
		UploadExpiry:       24 * time.Hour,
		MaxBodyBytes:       1 << 20,
		ReadHeaderTimeout:  10 * time.Second,
		ReadTimeout:        60 * time.Second,
		WriteTimeout:       60 * time.Second,
		IdleTimeout:        120 * time.Second,
		ShutdownTimeout:    20 * time.Second,
		HashConcurrency:    2,
		AuthCacheTTL:       time.Second,
		LedgerOrigin:       "beamledger.localhost/ledger",
		LedgerSealInterval: 500 * time.Millisecond,
		JobInterval:        time.Minute,
		MinPasswordLength:  accounts.MinPasswordLength,
		LoginPerAccount:    accounts.ThrottleRule{MaxFailures: 10, Window: 15 * time.Minute},
		LoginPerAddress:    accounts.ThrottleRule{MaxFailures: 50, Window: 15 * time.Minute},
		LogLevel:           slog.LevelInfo,
	}
}

// Validate reports every problem at once, naming the setting.
func (c Config) Validate() error {
	var errs []error
	bad := func(format string, args ...any) { errs = append(errs, fmt.Errorf(format, args...)) }
	if c.DatabaseURL == "" {
		bad("BEAMLEDGER_DATABASE_URL is required")
	}
	if c.DatabaseReplicaURL != "" && c.DatabaseReplicaURL == c.DatabaseURL {
		bad("BEAMLEDGER_DATABASE_REPLICA_URL names the primary itself; give a standby's URL or leave it unset")
	}
	if _, _, err := net.SplitHostPort(c.ListenAddr); err != nil {
		bad("listen address %q is not host:port", c.ListenAddr)
	}
	if err := checkSigningKey(c.SigningKey); err != nil {
		bad("BEAMLEDGER_JWT_SIGNING_KEY: %v", err)
	}
	for i, k := range c.VerifyKeys {
		if len(k) != ed25519.PublicKeySize {
			bad("BEAMLEDGER_JWT_VERIFY_KEYS: key %d is not an Ed25519 public key", i+1)
		}
	}
	if c.Issuer == "" || c.Audience == "" {
		bad("JWT issuer and audience must both be set")
	}
	if c.AccessTTL < time.Minute || c.AccessTTL > time.Hour {
		bad("access token lifetime %s must be between 1m and 1h", c.AccessTTL)
	}
	if c.RefreshTTL < c.AccessTTL || c.RefreshTTL > 90*24*time.Hour {
		bad("refresh token lifetime %s must be between the access lifetime and 90 days", c.RefreshTTL)
	}
	switch c.ObjectStore {
	case "disk":
		if c.ObjectDir == "" {
			bad("BEAMLEDGER_OBJECT_DIR is required for the disk object store")
		}
	case "s3":
		if c.S3.Endpoint == "" || c.S3.Bucket == "" {
			bad("BEAMLEDGER_S3_ENDPOINT and BEAMLEDGER_S3_BUCKET are required for the s3 object store")
		}
		if c.S3.AccessKey == "" || len(c.S3.SecretKey) < 8 {
			bad("BEAMLEDGER_S3_ACCESS_KEY and a BEAMLEDGER_S3_SECRET_KEY of at least 8 characters are required")
		}
	default:
		bad("object store %q must be disk or s3", c.ObjectStore)
	}
	if c.MaxFileBytes < 1<<20 {
		bad("max file size must be at least 1 MiB")
	}
	if c.ObjectRetention < 0 || c.ObjectRetention > 100*365*24*time.Hour {
		bad("object retention %s must be between 0 and 100 years", c.ObjectRetention)
	}
	if c.UploadExpiry < time.Second {
		bad("upload expiry %s must be at least 1s", c.UploadExpiry)
	}
	if c.MaxBodyBytes < 1024 {
		bad("max body size must be at least 1 KiB")
	}
	if c.AuthCacheTTL < 0 || c.AuthCacheTTL > 10*time.Second {
		bad("account-state cache %s must be between 0 and 10s", c.AuthCacheTTL)
	}
	if len(c.LedgerKey) > 0 {
		if err := checkSigningKey(c.LedgerKey); err != nil {
			bad("BEAMLEDGER_LEDGER_KEY: %v", err)
		} else if bytes.Equal(c.LedgerKey, c.SigningKey) {
			bad("BEAMLEDGER_LEDGER_KEY must not be the JWT signing key")
		}
	}
	if err := provenance.CheckOrigin(c.LedgerOrigin); err != nil {
		bad("BEAMLEDGER_LEDGER_ORIGIN: %v", err)
	}
	if c.LedgerSealInterval < 10*time.Millisecond || c.LedgerSealInterval > time.Minute {
		bad("ledger seal interval %s must be between 10ms and 1m", c.LedgerSealInterval)
	}
	if c.JobInterval < 100*time.Millisecond || c.JobInterval > time.Hour {
		bad("job interval %s must be between 100ms and 1h", c.JobInterval)
	}
	if c.LedgerCheckpointRetention < 0 || c.LedgerCheckpointRetention > 100*365*24*time.Hour {
		bad("ledger checkpoint retention %s must be between 0 and 100 years", c.LedgerCheckpointRetention)
	}
	if c.MetricsListen != "" {
		if _, port, err := net.SplitHostPort(c.MetricsListen); err != nil {
			bad("metrics listen address %q is not host:port", c.MetricsListen)
		} else if c.MetricsListen == c.ListenAddr && port != "0" {
			bad("metrics listen address must differ from the API's listen address")
		}
	}
	if c.MetricsToken != "" && len(c.MetricsToken) < 16 {
		bad("BEAMLEDGER_METRICS_TOKEN must be at least 16 characters")
	}
	if c.HashConcurrency < 1 {
		bad("hash concurrency must be at least 1")
	}
	if !c.Demo && c.MinPasswordLength < accounts.MinPasswordLength {
		bad("minimum password length must be at least %d outside demo mode", accounts.MinPasswordLength)
	}
	for name, r := range map[string]accounts.ThrottleRule{"per-account": c.LoginPerAccount, "per-address": c.LoginPerAddress} {
		if r.MaxFailures < 1 || r.Window <= 0 {
			bad("%s login throttle needs a positive failure count and window", name)
		}
	}
	return errors.Join(errs...)
}

// rfc8032Test1Seed is the secret key of RFC 8032 §7.1 test 1: public, so never a key.
var rfc8032Test1Seed, _ = hex.DecodeString("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")

func checkSigningKey(k ed25519.PrivateKey) error {
	switch {
	case len(k) == 0:
		return errors.New("is missing; generate one with `openssl genpkey -algorithm ed25519`")
	case len(k) != ed25519.PrivateKeySize:
		return errors.New("is not an Ed25519 private key")
	case bytes.Equal(k.Seed(), make([]byte, ed25519.SeedSize)), bytes.Equal(k.Seed(), rfc8032Test1Seed):
		return errors.New("is a well-known or all-zero key; generate a fresh one")
	}
	seed := k.Seed()
	distinct := map[byte]bool{}
	for _, b := range seed {
		distinct[b] = true
	}
	if len(distinct) < 8 {
		return errors.New("has too little entropy; generate a fresh one")
	}
	return nil
}

// ParseSigningKey reads an Ed25519 private key from PEM (PKCS #8, as written by
// `openssl genpkey -algorithm ed25519`) or from the base64 or hex of its 32-byte seed.
func ParseSigningKey(text string) (ed25519.PrivateKey, error) {
	text = strings.TrimSpace(text)
	if block, _ := pem.Decode([]byte(text)); block != nil {
		key, err := x509.ParsePKCS8PrivateKey(block.Bytes)
		if err != nil {
			return nil, fmt.Errorf("PEM key: %w", err)
		}
		k, ok := key.(ed25519.PrivateKey)
		if !ok {
			return nil, errors.New("PEM key is not Ed25519")
		}
		return k, nil
	}
	seed, err := decodeKeyBytes(text)
	if err != nil || len(seed) != ed25519.SeedSize {
		return nil, errors.New("want a PEM Ed25519 private key or the base64/hex of a 32-byte seed")
	}
	return ed25519.NewKeyFromSeed(seed), nil
}

// ParseVerifyKeys reads Ed25519 public keys separated by commas or newlines, each as
// PEM (PKIX) or base64/hex of the 32-byte key.
func ParseVerifyKeys(text string) ([]ed25519.PublicKey, error) {
	var keys []ed25519.PublicKey
	rest := []byte(strings.TrimSpace(text))
	for {
		block, r := pem.Decode(rest)
		if block == nil {
			break
		}
		rest = r
		key, err := x509.ParsePKIXPublicKey(block.Bytes)
		if err != nil {
			return nil, fmt.Errorf("PEM public key: %w", err)
		}
		k, ok := key.(ed25519.PublicKey)
		if !ok {
			return nil, errors.New("PEM public key is not Ed25519")
		}
		keys = append(keys, k)
	}
	for _, f := range strings.FieldsFunc(string(rest), func(r rune) bool { return r == ',' || r == '\n' || r == ' ' }) {
		b, err := decodeKeyBytes(f)
		if err != nil || len(b) != ed25519.PublicKeySize {
			return nil, errors.New("want PEM Ed25519 public keys or base64/hex of 32-byte keys")
		}
		keys = append(keys, ed25519.PublicKey(b))
	}
	return keys, nil
}

func decodeKeyBytes(s string) ([]byte, error) {
	if b, err := hex.DecodeString(s); err == nil {
		return b, nil
	}
	if b, err := base64.StdEncoding.DecodeString(s); err == nil {
		return b, nil
	}
	return base64.RawURLEncoding.DecodeString(s)
}

// LogValue renders the config for the start-up log with secrets redacted.
func (c Config) LogValue() slog.Value {
	return slog.GroupValue(
		slog.String("database_url", redactURL(c.DatabaseURL)),
		slog.String("database_replica_url", redactURL(c.DatabaseReplicaURL)),
		slog.String("listen_addr", c.ListenAddr),
		slog.String("jwt_issuer", c.Issuer),
		slog.String("jwt_audience", c.Audience),
		slog.String("jwt_signing_kid", signingKID(c.SigningKey)),
		slog.Int("jwt_verify_keys", len(c.VerifyKeys)),
		slog.Duration("access_ttl", c.AccessTTL),
		slog.Duration("refresh_ttl", c.RefreshTTL),
		slog.String("object_store", c.ObjectStore),
		slog.String("object_dir", c.ObjectDir),
		slog.Int64("max_file_bytes", c.MaxFileBytes),
		slog.Duration("object_retention", c.ObjectRetention),
		slog.Duration("upload_expiry", c.UploadExpiry),
		slog.String("s3_endpoint", c.S3.Endpoint),
		slog.String("s3_bucket", c.S3.Bucket),
		slog.String("s3_access_key", redactSecret(c.S3.AccessKey)),
		slog.String("s3_secret_key", redactSecret(c.S3.SecretKey)),
		slog.Int64("max_body_bytes", c.MaxBodyBytes),
		slog.Int("hash_concurrency", c.HashConcurrency),
		slog.Duration("auth_cache_ttl", c.AuthCacheTTL),
		slog.Bool("trust_proxy_headers", c.TrustProxyHeaders),
		slog.String("ledger_origin", c.LedgerOrigin),
		slog.String("ledger_key_id", signingKID(c.LedgerKey)),
		slog.Duration("ledger_seal_interval", c.LedgerSealInterval),
		slog.Duration("ledger_checkpoint_retention", c.LedgerCheckpointRetention),
		slog.Duration("job_interval", c.JobInterval),
		slog.String("metrics_listen", c.MetricsListen),
		slog.String("metrics_token", redactSecret(c.MetricsToken)),
		slog.Bool("demo", c.Demo),
	)
}

func signingKID(k ed25519.PrivateKey) string {
	if len(k) != ed25519.PrivateKeySize {
		return ""
	}
	return keyID(k.Public().(ed25519.PublicKey))
}

func redactSecret(s string) string {
	if s == "" {
		return ""
	}
	return "[redacted]"
}

var keywordSecret = regexp.MustCompile(`(?i)\b(password|sslpassword)\s*=\s*('(?:[^'\\]|\\.)*'|\S+)`)

// redactURL renders a database connection string for the log without its secrets:
// URLs lose the password and the whole query (which may carry password= or
// sslpassword=); keyword/value strings have their secret values replaced.
func redactURL(s string) string {
	u, err := url.Parse(s)
	if err != nil || (u.Scheme != "postgres" && u.Scheme != "postgresql") {
		return keywordSecret.ReplaceAllString(s, "$1=[redacted]")
	}
	if _, ok := u.User.Password(); ok {
		u.User = url.UserPassword(u.User.Username(), "redacted")
	}
	if u.RawQuery != "" {
		u.RawQuery = "[query redacted]"
	}
	return u.String()
}
