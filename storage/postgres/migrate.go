package postgres

import (
	"context"
	"database/sql"
	"fmt"
	"log/slog"

	"github.com/jackc/pgx/v5/stdlib"
	"github.com/pressly/goose/v3"
	"github.com/pressly/goose/v3/lock"

	"beamledger/migrations"
)

// SchemaState compares the database's schema with the migrations this binary embeds.
type SchemaState struct {
	Current int64 // applied version in the database
	Known   int64 // newest version this binary knows
}

// UpToDate reports whether the database is exactly at the version this binary knows.
func (s SchemaState) UpToDate() bool { return s.Current == s.Known }

// TooNew reports whether the database was migrated by a newer binary.
func (s SchemaState) TooNew() bool { return s.Current > s.Known }

func (db *DB) provider(log *slog.Logger) (*goose.Provider, *sql.DB, error) {
	sqlDB := stdlib.OpenDBFromPool(db.pool)
	// A session advisory lock makes concurrent `migrate up` from several processes safe.
	locker, err := lock.NewPostgresSessionLocker()
	if err != nil {
		return nil, nil, err
	}
	opts := []goose.ProviderOption{goose.WithSessionLocker(locker), goose.WithDisableGlobalRegistry(true)}
	if log != nil {
		opts = append(opts, goose.WithSlog(log))
	}
	p, err := goose.NewProvider(goose.DialectPostgres, sqlDB, migrations.FS, opts...)
	if err != nil {
		sqlDB.Close()
		return nil, nil, fmt.Errorf("load migrations: %w", err)
	}
	return p, sqlDB, nil
}

// Migrate applies every pending migration, each in its own transaction, and refuses a
// database whose schema is newer than this binary knows.
func (db *DB) Migrate(ctx context.Context, log *slog.Logger) (SchemaState, error) {
	p, sqlDB, err := db.provider(log)
	if err != nil {
		return SchemaState{}, err
	}
	defer sqlDB.Close()
	state, err := schemaState(ctx, p)
	if err != nil {
		return state, err
	}
	if state.TooNew() {
		return state, fmt.Errorf("database schema is at version %d but this binary knows only up to %d: run a newer beamledger", state.Current, state.Known)
	}
	if _, err := p.Up(ctx); err != nil {
		return state, fmt.Errorf("apply migrations: %w", err)
	}
	return schemaState(ctx, p)
}

// Schema reports the database's schema version against the embedded migrations.
func (db *DB) Schema(ctx context.Context) (SchemaState, error) {
	p, sqlDB, err := db.provider(nil)
	if err != nil {
		return SchemaState{}, err
	}
	defer sqlDB.Close()
	return schemaState(ctx, p)
}

// MigrationStatus lists every known migration and whether it is applied.
func (db *DB) MigrationStatus(ctx context.Context) ([]string, error) {
	p, sqlDB, err := db.provider(nil)
	if err != nil {
		return nil, err
	}
	defer sqlDB.Close()
	st, err := p.Status(ctx)
	if err != nil {
		return nil, err
	}
	lines := make([]string, 0, len(st))
	for _, s := range st {
		at := "pending"
		if s.State == goose.StateApplied {
			at = "applied " + s.AppliedAt.UTC().Format("2006-01-02T15:04:05Z")
		}
		lines = append(lines, fmt.Sprintf("%04d  %-40s %s", s.Source.Version, s.Source.Path, at))
	}
	return lines, nil
}

func schemaState(ctx context.Context, p *goose.Provider) (SchemaState, error) {
	cur, err := p.GetDBVersion(ctx)
	if err != nil {
		return SchemaState{}, fmt.Errorf("read schema version: %w", err)
	}
	var known int64
	for _, s := range p.ListSources() {
		known = max(known, s.Version)
	}
	return SchemaState{Current: cur, Known: known}, nil
}
