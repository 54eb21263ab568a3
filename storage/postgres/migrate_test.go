package postgres_test

import (
	"context"
	"strconv"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"
)

func countVersionRows(t *testing.T, conn *pgx.Conn) int {
	t.Helper()
	var n int
	if err := conn.QueryRow(context.Background(), `SELECT count(*) FROM goose_db_version`).Scan(&n); err != nil {
		t.Fatal(err)
	}
	return n
}

func TestMigrateFromEmptyThenIdempotent(t *testing.T) {
	t.Parallel()
	db, conn := openRaw(t)
	ctx := context.Background()
	// pgtest hands out migrated databases; empty this one to start from nothing.
	if _, err := conn.Exec(ctx, `DROP SCHEMA public CASCADE; CREATE SCHEMA public`); err != nil {
		t.Fatal(err)
	}

	lines, err := db.MigrationStatus(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(lines) == 0 || !strings.HasPrefix(lines[0], "0001") || !strings.Contains(lines[0], "pending") {
		t.Fatalf("MigrationStatus before migrating = %q, want 0001 pending first", lines)
	}

	first, err := db.Migrate(ctx, nil)
	if err != nil {
		t.Fatal(err)
	}
	if first.Known < 1 || !first.UpToDate() || first.TooNew() {
		t.Fatalf("after the first Migrate: %+v", first)
	}
	rows := countVersionRows(t, conn)
	if _, err := db.CreateUser(ctx, newUserFor("ann@example.org"), ""); err != nil {
		t.Fatalf("the migrated schema does not take a user: %v", err)
	}

	second, err := db.Migrate(ctx, nil)
	if err != nil {
		t.Fatal(err)
	}
	if second != first {
		t.Errorf("second Migrate = %+v, want %+v", second, first)
	}
	if got := countVersionRows(t, conn); got != rows {
		t.Errorf("second Migrate wrote version rows: %d → %d", rows, got)
	}
	if _, err := db.CredentialsByEmail(ctx, "ann@example.org"); err != nil {
		t.Errorf("data did not survive the second Migrate: %v", err)
	}
}

func TestSchemaOfMigratedDatabase(t *testing.T) {
	t.Parallel()
	db, _ := openRaw(t)
	ctx := context.Background()
	st, err := db.Schema(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if st.Known < 1 || st.Current != st.Known || !st.UpToDate() || st.TooNew() {
		t.Fatalf("Schema = %+v, want up to date", st)
	}
	again, err := db.Migrate(ctx, nil)
	if err != nil || again != st {
		t.Fatalf("Migrate on an up-to-date database = %+v, %v; want %+v", again, err, st)
	}
	lines, err := db.MigrationStatus(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if int64(len(lines)) != st.Known {
		t.Errorf("MigrationStatus has %d lines, want one per known migration (%d): %q", len(lines), st.Known, lines)
	}
	if len(lines) == 0 || !strings.HasPrefix(lines[0], "0001  ") || !strings.Contains(lines[0], "0001_foundation.sql") ||
		!strings.Contains(lines[0], "applied 20") {
		t.Errorf("MigrationStatus = %q, want 0001_foundation.sql applied first", lines)
	}
	for _, l := range lines {
		if strings.Contains(l, "pending") {
			t.Errorf("migration pending on an up-to-date database: %q", l)
		}
	}
}

// A newer binary migrated this database past what this one knows: running against it
// could corrupt data the newer schema protects, so the old binary must stop.
func TestSchemaTooNew(t *testing.T) {
	t.Parallel()
	db, conn := openRaw(t)
	ctx := context.Background()
	st, err := db.Schema(ctx)
	if err != nil {
		t.Fatal(err)
	}
	newer := st.Known + 1
	if _, err := conn.Exec(ctx, `INSERT INTO goose_db_version (version_id, is_applied) VALUES ($1, true)`, newer); err != nil {
		t.Fatal(err)
	}
	rows := countVersionRows(t, conn)

	st, err = db.Schema(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if st.Current != newer || !st.TooNew() || st.UpToDate() {
		t.Fatalf("Schema = %+v, want too new at %d", st, newer)
	}
	got, err := db.Migrate(ctx, nil)
	if err == nil {
		t.Fatalf("Migrate on a too-new database succeeded: %+v", got)
	}
	if !got.TooNew() {
		t.Errorf("Migrate returned state %+v, want the too-new state", got)
	}
	msg := err.Error()
	for _, want := range []string{strconv.FormatInt(newer, 10), strconv.FormatInt(st.Known, 10), "newer"} {
		if !strings.Contains(msg, want) {
			t.Errorf("Migrate error %q does not mention %q", msg, want)
		}
	}
	if n := countVersionRows(t, conn); n != rows {
		t.Errorf("refused Migrate changed version rows: %d → %d", rows, n)
	}
}
