// Package migrations embeds the schema migrations, applied in order by
// storage/postgres. Files are NNNN_name.sql in goose's format, each run in its own
// transaction; an applied migration is never edited, only followed by a new one.
package migrations

import "embed"

// FS holds the migration files.
//
//go:embed *.sql
var FS embed.FS
