package postgres

import (
	"context"
	"fmt"
	"regexp"

	"github.com/jackc/pgx/v5"
)

var databaseName = regexp.MustCompile(`^[a-z_][a-z0-9_]{0,62}$`)

// EnsureDatabase creates database name on the server at adminURL unless it exists. It
// serves the embedded demo, whose private cluster starts with only "postgres".
func EnsureDatabase(ctx context.Context, adminURL, name string) error {
	if !databaseName.MatchString(name) {
		return fmt.Errorf("database name %q is not a plain lower-case identifier", name)
	}
	conn, err := pgx.Connect(ctx, adminURL)
	if err != nil {
		return fmt.Errorf("connect to database server: %w", err)
	}
	defer conn.Close(ctx)
	var exists bool
	if err := conn.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_database WHERE datname = $1)`, name).Scan(&exists); err != nil {
		return err
	}
	if exists {
		return nil
	}
	// The name is checked above; identifiers cannot be bound as parameters.
	_, err = conn.Exec(ctx, "CREATE DATABASE "+name)
	return err
}
