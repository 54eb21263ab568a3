package main

import (
	"errors"
	"flag"
	"fmt"
	"log/slog"
	"os"
	"strconv"
	"strings"
	"time"

	"beamledger/server"
)

// envFlags binds flags whose defaults come from BEAMLEDGER_* variables, so every
// setting can be given either way and a flag wins over the environment.
type envFlags struct {
	fs   *flag.FlagSet
	errs []error
}

func (e *envFlags) str(p *string, name, env, usage string) {
	if v, ok := os.LookupEnv(env); ok {
		*p = v
	}
	e.fs.StringVar(p, name, *p, usage+" ($"+env+")")
}

func (e *envFlags) duration(p *time.Duration, name, env, usage string) {
	if v, ok := os.LookupEnv(env); ok {
		d, err := time.ParseDuration(v)
		if err != nil {
			e.errs = append(e.errs, fmt.Errorf("%s: %q is not a duration such as 15m", env, v))
		} else {
			*p = d
		}
	}
	e.fs.DurationVar(p, name, *p, usage+" ($"+env+")")
}

func (e *envFlags) boolean(p *bool, name, env, usage string) {
	if v, ok := os.LookupEnv(env); ok {
		b, err := strconv.ParseBool(v)
		if err != nil {
			e.errs = append(e.errs, fmt.Errorf("%s: %q is not true or false", env, v))
		} else {
			*p = b
		}
	}
	e.fs.BoolVar(p, name, *p, usage+" ($"+env+")")
}

func (e *envFlags) integer(p *int64, name, env, usage string) {
	if v, ok := os.LookupEnv(env); ok {
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil {
			e.errs = append(e.errs, fmt.Errorf("%s: %q is not a whole number", env, v))
		} else {
			*p = n
		}
	}
	e.fs.Int64Var(p, name, *p, usage+" ($"+env+")")
}

// secret reads a secret from $ENV or from the file named by $ENV_FILE (never from a
// flag, which other users could read in the process list). Both set is an error.
func secret(env string) (string, error) {
	v, hasV := os.LookupEnv(env)
	file, hasF := os.LookupEnv(env + "_FILE")
	switch {
	case hasV && hasF:
		return "", fmt.Errorf("set %s or %s_FILE, not both", env, env)
	case hasF:
		b, err := os.ReadFile(file)
		if err != nil {
			return "", fmt.Errorf("%s_FILE: %w", env, err)
		}
		return strings.TrimSpace(string(b)), nil
	}
	return v, nil
}

// serverFlags registers every server setting on fs and returns a function that,
// after fs.Parse, finishes the Config (reading secrets) and validates it.
func serverFlags(fs *flag.FlagSet, cfg *server.Config) func() error {
	e := &envFlags{fs: fs}
	e.str(&cfg.ListenAddr, "listen", "BEAMLEDGER_LISTEN", "address to listen on")
	e.str(&cfg.Issuer, "jwt-issuer", "BEAMLEDGER_JWT_ISSUER", "iss claim of access tokens")
	e.str(&cfg.Audience, "jwt-audience", "BEAMLEDGER_JWT_AUDIENCE", "aud claim of access tokens")
	e.duration(&cfg.AccessTTL, "access-ttl", "BEAMLEDGER_ACCESS_TTL", "access token lifetime")
	e.duration(&cfg.RefreshTTL, "refresh-ttl", "BEAMLEDGER_REFRESH_TTL", "refresh token lifetime")
	objectFlags(e, cfg)
	e.boolean(&cfg.S3.CreateBucket, "s3-create-bucket", "BEAMLEDGER_S3_CREATE_BUCKET", "create the S3 bucket on first use when missing")
	e.boolean(&cfg.S3.ObjectLock, "s3-object-lock", "BEAMLEDGER_S3_OBJECT_LOCK", "create the bucket with object locking (needed for retention)")
	e.integer(&cfg.MaxFileBytes, "max-file-bytes", "BEAMLEDGER_MAX_FILE_BYTES", "largest data file accepted")
	e.duration(&cfg.ObjectRetention, "object-retention", "BEAMLEDGER_OBJECT_RETENTION", "governance-mode retention of each data file's object (0: none)")
	e.duration(&cfg.UploadExpiry, "upload-expiry", "BEAMLEDGER_UPLOAD_EXPIRY", "how long an unfinished resumable upload may sit idle before it is discarded")
	e.integer(&cfg.MaxBodyBytes, "max-body-bytes", "BEAMLEDGER_MAX_BODY_BYTES", "largest JSON request body")
	e.duration(&cfg.AuthCacheTTL, "auth-cache-ttl", "BEAMLEDGER_AUTH_CACHE_TTL", "how long a process reuses a user's account state (0: every request)")
	e.boolean(&cfg.TrustProxyHeaders, "trust-proxy-headers", "BEAMLEDGER_TRUST_PROXY_HEADERS", "take client addresses from X-Forwarded-For")
	e.str(&cfg.LedgerOrigin, "ledger-origin", "BEAMLEDGER_LEDGER_ORIGIN", "the ledger's name in its checkpoints, e.g. ledger.facility.example.org")
	e.duration(&cfg.LedgerSealInterval, "ledger-seal-interval", "BEAMLEDGER_LEDGER_SEAL_INTERVAL", "how often ledger events are sealed into the tree")
	e.duration(&cfg.JobInterval, "job-interval", "BEAMLEDGER_JOB_INTERVAL", "how often no-shows and lapsed waitlist offers are looked for")
	e.duration(&cfg.LedgerCheckpointRetention, "ledger-checkpoint-retention", "BEAMLEDGER_LEDGER_CHECKPOINT_RETENTION", "publish signed checkpoints to the object store, under compliance-mode retention this long (0: do not)")
	e.str(&cfg.MetricsListen, "metrics-listen", "BEAMLEDGER_METRICS_LISTEN", "separate host:port answering GET /metrics (empty: no metrics; a scrape token in $BEAMLEDGER_METRICS_TOKEN)")
	hashN := int64(cfg.HashConcurrency)
	e.integer(&hashN, "hash-concurrency", "BEAMLEDGER_HASH_CONCURRENCY", "password hashes computed at once")
	level := "info"
	e.str(&level, "log-level", "BEAMLEDGER_LOG_LEVEL", "debug, info, warn or error")
	return func() error {
		errs := e.errs
		cfg.HashConcurrency = int(hashN)
		if err := cfg.LogLevel.UnmarshalText([]byte(level)); err != nil {
			errs = append(errs, fmt.Errorf("log level %q: want debug, info, warn or error", level))
		}
		if err := readSecrets(cfg); err != nil {
			errs = append(errs, err)
		}
		if err := errors.Join(errs...); err != nil {
			return err
		}
		return cfg.Validate()
	}
}

// objectFlags registers the settings that locate the object store, shared by serve
// and the commands that read stored objects (scrub).
func objectFlags(e *envFlags, cfg *server.Config) {
	e.str(&cfg.ObjectStore, "object-store", "BEAMLEDGER_OBJECT_STORE", "object store: disk or s3")
	e.str(&cfg.ObjectDir, "object-dir", "BEAMLEDGER_OBJECT_DIR", "directory of the disk object store")
	e.str(&cfg.S3.Endpoint, "s3-endpoint", "BEAMLEDGER_S3_ENDPOINT", "S3 endpoint host:port")
	e.str(&cfg.S3.Region, "s3-region", "BEAMLEDGER_S3_REGION", "S3 region")
	e.str(&cfg.S3.Bucket, "s3-bucket", "BEAMLEDGER_S3_BUCKET", "S3 bucket")
	e.boolean(&cfg.S3.UseTLS, "s3-tls", "BEAMLEDGER_S3_TLS", "use TLS to reach S3")
	e.boolean(&cfg.S3.PathStyle, "s3-path-style", "BEAMLEDGER_S3_PATH_STYLE", "path-style S3 addressing")
	e.boolean(&cfg.S3.SignPayload, "s3-sign-payload", "BEAMLEDGER_S3_SIGN_PAYLOAD",
		"sign S3 payloads instead of sending a CRC32C with them (for S3 servers without checksums)")
}

// readSecrets fills the secret settings, which come only from the environment or files.
func readSecrets(cfg *server.Config) error {
	var errs []error
	get := func(env string) string {
		v, err := secret(env)
		if err != nil {
			errs = append(errs, err)
		}
		return v
	}
	if v := get("BEAMLEDGER_DATABASE_URL"); v != "" {
		cfg.DatabaseURL = v
	}
	if v := get("BEAMLEDGER_DATABASE_REPLICA_URL"); v != "" {
		cfg.DatabaseReplicaURL = v
	}
	if v := get("BEAMLEDGER_JWT_SIGNING_KEY"); v != "" {
		k, err := server.ParseSigningKey(v)
		if err != nil {
			errs = append(errs, fmt.Errorf("BEAMLEDGER_JWT_SIGNING_KEY: %w", err))
		}
		cfg.SigningKey = k
	}
	if v := get("BEAMLEDGER_JWT_VERIFY_KEYS"); v != "" {
		ks, err := server.ParseVerifyKeys(v)
		if err != nil {
			errs = append(errs, fmt.Errorf("BEAMLEDGER_JWT_VERIFY_KEYS: %w", err))
		}
		cfg.VerifyKeys = ks
	}
	if v := get("BEAMLEDGER_LEDGER_KEY"); v != "" {
		k, err := server.ParseSigningKey(v)
		if err != nil {
			errs = append(errs, fmt.Errorf("BEAMLEDGER_LEDGER_KEY: %w", err))
		}
		cfg.LedgerKey = k
	}
	if v := get("BEAMLEDGER_METRICS_TOKEN"); v != "" {
		cfg.MetricsToken = v
	}
	if v := get("BEAMLEDGER_S3_ACCESS_KEY"); v != "" {
		cfg.S3.AccessKey = v
	}
	if v := get("BEAMLEDGER_S3_SECRET_KEY"); v != "" {
		cfg.S3.SecretKey = v
	}
	return errors.Join(errs...)
}

// databaseURL reads the database URL for commands that need nothing else.
func databaseURL() (string, error) {
	v, err := secret("BEAMLEDGER_DATABASE_URL")
	if err != nil {
		return "", err
	}
	if v == "" {
		return "", errors.New("BEAMLEDGER_DATABASE_URL (or BEAMLEDGER_DATABASE_URL_FILE) is required")
	}
	return v, nil
}

func logLevelFromEnv() slog.Level {
	var l slog.Level
	if err := l.UnmarshalText([]byte(os.Getenv("BEAMLEDGER_LOG_LEVEL"))); err != nil {
		return slog.LevelInfo
	}
	return l
}
