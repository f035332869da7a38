// Package migrations holds the SQL that creates and upgrades assort's
// registry. Files are named NNN_description.sql and applied in order of NNN;
// each is written without schema qualification and runs with search_path
// set to the registry schema.
package migrations

import "embed"

// FS holds the migration files.
//
//go:embed *.sql
var FS embed.FS
