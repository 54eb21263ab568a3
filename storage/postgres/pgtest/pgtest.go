// Package pgtest gives each test package a fresh, migrated PostgreSQL database on the
// server named by BEAMLEDGER_TEST_DATABASE_URL (set by `make test`, which starts a
// throwaway cluster). Databases are cloned from a template migrated once per schema,
// so a package pays for CREATE DATABASE, not for every migration.
package pgtest

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io/fs"
	"net/url"
	"os"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/migrations"
	"beamledger/storage/postgres"
)

// EnvURL names the variable holding an admin URL of the test server.
const EnvURL = "BEAMLEDGER_TEST_DATABASE_URL"

// NewDatabase creates a fresh migrated database, returns its URL, and drops it when
// the test (or the TestMain's returned cleanup) ends. It fails the test when no test
// server is configured: run `make test`, or set BEAMLEDGER_TEST_DATABASE_URL.
func NewDatabase(tb testing.TB) string {
	tb.Helper()
	admin := os.Getenv(EnvURL)
	if admin == "" {
		tb.Fatalf("%s is not set: run the tests with `make test`, which starts a throwaway PostgreSQL, or point it at a server you own", EnvURL)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	dbURL, drop, err := create(ctx, admin)
	if err != nil {
		tb.Fatalf("create test database: %v", err)
	}
	tb.Cleanup(drop)
	return dbURL
}

// Open is NewDatabase plus postgres.Open with a pool of 8 connections; the DB is
// closed at cleanup.
func Open(tb testing.TB) *postgres.DB {
	tb.Helper()
	return OpenPool(tb, 8)
}

// OpenPool is Open with a pool of maxConns connections (benchmarks with many clients).
func OpenPool(tb testing.TB, maxConns int32) *postgres.DB {
	tb.Helper()
	dbURL := NewDatabase(tb)
	db, err := postgres.Open(context.Background(), dbURL, maxConns)
	if err != nil {
		tb.Fatalf("open test database: %v", err)
	}
	tb.Cleanup(db.Close)
	return db
}

func create(ctx context.Context, admin string) (string, func(), error) {
	conn, err := pgx.Connect(ctx, admin)
	if err != nil {
		return "", nil, err
	}
	defer conn.Close(ctx)
	tmpl, err := ensureTemplate(ctx, conn, admin)
	if err != nil {
		return "", nil, err
	}
	name := "beamledger_test_" + randomHex(6)
	if _, err := conn.Exec(ctx, fmt.Sprintf("CREATE DATABASE %s TEMPLATE %s", name, tmpl)); err != nil {
		return "", nil, fmt.Errorf("clone template: %w", err)
	}
	drop := func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		c, err := pgx.Connect(ctx, admin)
		if err != nil {
			return
		}
		defer c.Close(ctx)
		_, _ = c.Exec(ctx, fmt.Sprintf("DROP DATABASE IF EXISTS %s WITH (FORCE)", name))
	}
	return withDatabase(admin, name), drop, nil
}

// ensureTemplate creates (once per schema, across concurrent test packages) a database
// migrated to the embedded schema, named after a hash of the migration files.
func ensureTemplate(ctx context.Context, conn *pgx.Conn, admin string) (string, error) {
	name := "beamledger_tmpl_" + migrationsHash()
	// A cluster-wide advisory lock keeps two packages from building it at once.
	if _, err := conn.Exec(ctx, `SELECT pg_advisory_lock(727274)`); err != nil {
		return "", err
	}
	defer conn.Exec(context.Background(), `SELECT pg_advisory_unlock(727274)`)
	var exists bool
	if err := conn.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_database WHERE datname = $1)`, name).Scan(&exists); err != nil {
		return "", err
	}
	if exists {
		return name, nil
	}
	building := name + "_build"
	if _, err := conn.Exec(ctx, fmt.Sprintf("DROP DATABASE IF EXISTS %s WITH (FORCE)", building)); err != nil {
		return "", err
	}
	if _, err := conn.Exec(ctx, fmt.Sprintf("CREATE DATABASE %s", building)); err != nil {
		return "", err
	}
	db, err := postgres.Open(ctx, withDatabase(admin, building), 2)
	if err != nil {
		return "", err
	}
	_, err = db.Migrate(ctx, nil)
	db.Close()
	if err != nil {
		return "", err
	}
	// Renamed only when complete, so a crash mid-way never leaves a half-built template.
	if _, err := conn.Exec(ctx, fmt.Sprintf("ALTER DATABASE %s RENAME TO %s", building, name)); err != nil {
		return "", err
	}
	return name, nil
}

func migrationsHash() string {
	h := sha256.New()
	_ = fs.WalkDir(migrations.FS, ".", func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := fs.ReadFile(migrations.FS, path)
		h.Write([]byte(path))
		h.Write(b)
		return err
	})
	return hex.EncodeToString(h.Sum(nil))[:12]
}

func withDatabase(admin, name string) string {
	u, err := url.Parse(admin)
	if err != nil {
		return admin
	}
	u.Path = "/" + name
	return u.String()
}

func randomHex(n int) string {
	b := make([]byte, n)
	_, _ = rand.Read(b)
	return hex.EncodeToString(b)
}
