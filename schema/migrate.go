package schema

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"sort"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/migrations"
)

// Migration is one numbered SQL file of the registry.
type Migration struct {
	N    int
	Name string
	SQL  string
}

// Migrations returns the embedded migrations in order.
func Migrations() []Migration {
	files, err := fs.Glob(migrations.FS, "*.sql")
	if err != nil {
		panic("schema: " + err.Error())
	}
	var ms []Migration
	for _, f := range files {
		num, _, ok := strings.Cut(f, "_")
		n, err := strconv.Atoi(num)
		if !ok || err != nil {
			panic(fmt.Sprintf("schema: migration file %q is not named NNN_description.sql", f))
		}
		b, err := migrations.FS.ReadFile(f)
		if err != nil {
			panic("schema: " + err.Error())
		}
		ms = append(ms, Migration{N: n, Name: strings.TrimSuffix(f, ".sql"), SQL: string(b)})
	}
	sort.Slice(ms, func(i, j int) bool { return ms[i].N < ms[j].N })
	for i, m := range ms {
		if m.N != i+1 {
			panic(fmt.Sprintf("schema: migrations must be numbered 1, 2, 3...; %s is number %d", m.Name, i+1))
		}
	}
	return ms
}

// Latest is the number of the newest embedded migration.
func Latest() int { return len(Migrations()) }

// lockKey is the advisory lock that serialises migrations of one schema.
func lockKey(schema string) string { return "assort migrate " + schema }

// createSchema creates the registry schema.
func createSchema(schema string) string {
	return "CREATE SCHEMA IF NOT EXISTS " + pgx.Identifier{schema}.Sanitize() + ";\n"
}

// bootstrap creates the table of applied migrations.
func bootstrap(schema string) string {
	return "CREATE TABLE IF NOT EXISTS " + pgx.Identifier{schema, "migrations"}.Sanitize() + ` (
    version     integer     PRIMARY KEY,
    name        text        NOT NULL,
    applied_at  timestamptz NOT NULL DEFAULT clock_timestamp(),
    applied_by  text        NOT NULL DEFAULT current_user
);
`
}

// Script returns every migration as one SQL script for a DBA to review and
// apply by hand (psql -1 -f). It is idempotent only as a whole transaction:
// it skips nothing, so apply it to a schema with no registry yet.
func Script(schema string) string {
	var b strings.Builder
	b.WriteString("-- assort registry in schema " + pgx.Identifier{schema}.Sanitize() + "; apply in one transaction (psql -1 -f FILE).\n")
	b.WriteString(createSchema(schema))
	b.WriteString(bootstrap(schema))
	b.WriteString("SET LOCAL search_path TO " + pgx.Identifier{schema}.Sanitize() + ";\n")
	for _, m := range Migrations() {
		fmt.Fprintf(&b, "\n-- %s\n%s", m.Name, m.SQL)
		fmt.Fprintf(&b, "INSERT INTO migrations (version, name) VALUES (%d, '%s');\n", m.N, m.Name)
	}
	return b.String()
}

// Migrate brings the registry in schema up to date: in one transaction,
// under an advisory lock, it creates the schema if needed and applies every
// migration not yet recorded. It returns the migrations it applied; none
// when the registry was current. Running it twice is harmless.
func Migrate(ctx context.Context, conn *pgx.Conn, schema string) (applied []Migration, err error) {
	tx, err := conn.Begin(ctx)
	if err != nil {
		return nil, fmt.Errorf("migrate: %w", err)
	}
	defer func() {
		if err != nil {
			_ = tx.Rollback(ctx)
		}
	}()
	if _, err := tx.Exec(ctx, "SELECT pg_advisory_xact_lock(hashtextextended($1, 0))", lockKey(schema)); err != nil {
		return nil, fmt.Errorf("migrate: lock: %w", err)
	}
	// CREATE SCHEMA IF NOT EXISTS needs CREATE on the database even when
	// the schema exists; a role that owns a schema its DBA made has not.
	var exists bool
	if err := tx.QueryRow(ctx, "SELECT EXISTS (SELECT 1 FROM pg_namespace WHERE nspname = $1)", schema).Scan(&exists); err != nil {
		return nil, fmt.Errorf("migrate: %w", err)
	}
	if !exists {
		if _, err := tx.Exec(ctx, createSchema(schema)); err != nil {
			return nil, fmt.Errorf("migrate: create schema %s: %w", schema, err)
		}
	}
	if _, err := tx.Exec(ctx, bootstrap(schema)); err != nil {
		return nil, fmt.Errorf("migrate: create schema %s: %w", schema, err)
	}
	if _, err := tx.Exec(ctx, "SET LOCAL search_path TO "+pgx.Identifier{schema}.Sanitize()); err != nil {
		return nil, fmt.Errorf("migrate: %w", err)
	}
	var have int
	if err := tx.QueryRow(ctx, "SELECT coalesce(max(version), 0) FROM migrations").Scan(&have); err != nil {
		return nil, fmt.Errorf("migrate: read applied migrations: %w", err)
	}
	ms := Migrations()
	if have > len(ms) {
		return nil, fmt.Errorf("migrate: the registry in schema %s is at migration %d, newer than this assort (%d); upgrade assort", schema, have, len(ms))
	}
	for _, m := range ms[have:] {
		if _, err := tx.Exec(ctx, m.SQL); err != nil {
			return nil, fmt.Errorf("migrate: %s: %w", m.Name, err)
		}
		if _, err := tx.Exec(ctx, "INSERT INTO migrations (version, name) VALUES ($1, $2)", m.N, m.Name); err != nil {
			return nil, fmt.Errorf("migrate: record %s: %w", m.Name, err)
		}
		applied = append(applied, m)
	}
	if err := tx.Commit(ctx); err != nil {
		return nil, fmt.Errorf("migrate: commit: %w", err)
	}
	return applied, nil
}

// ErrOutdated says the registry needs `assort migrate`.
var ErrOutdated = errors.New("registry is missing or outdated")

// Check returns an error wrapping ErrOutdated unless the registry in schema
// is exactly at the newest embedded migration.
func Check(ctx context.Context, q Querier, schema string) error {
	var have int
	err := q.QueryRow(ctx, "SELECT coalesce(max(version), 0) FROM "+pgx.Identifier{schema, "migrations"}.Sanitize()).Scan(&have)
	var pgErr *pgconn.PgError
	switch {
	case errors.As(err, &pgErr) && (pgErr.Code == "42P01" || pgErr.Code == "3F000"): // undefined table, schema
		return fmt.Errorf("%w: no registry in schema %s; run `assort migrate` first", ErrOutdated, schema)
	case err != nil:
		return fmt.Errorf("check registry: %w", err)
	case have < Latest():
		return fmt.Errorf("%w: the registry in schema %s is at migration %d, this assort needs %d; run `assort migrate`", ErrOutdated, schema, have, Latest())
	case have > Latest():
		return fmt.Errorf("the registry in schema %s is at migration %d, newer than this assort (%d); upgrade assort", schema, have, Latest())
	}
	return nil
}

// Querier is what both a connection and a transaction offer.
type Querier interface {
	Exec(ctx context.Context, sql string, args ...any) (pgconn.CommandTag, error)
	Query(ctx context.Context, sql string, args ...any) (pgx.Rows, error)
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
}
