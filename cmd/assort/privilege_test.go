package main

import (
	"context"
	"errors"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/dbio/dbtest"
)

// TestLeastPrivilege sets up the two roles of docs/least-privilege.sql (the
// file itself, with its example names changed to ones of this test) and
// runs assort as the role that owns the output schema: a non-superuser
// that can only read the catalogue. migrate, fit and publish work; a
// query that tries to write is refused, or its effect undone, by the READ
// ONLY transaction the query runs in; writing into the catalogue is
// refused by the privileges.
func TestLeastPrivilege(t *testing.T) {
	ctx := t.Context()
	admin := dbtest.Conn(t) // superuser of the test server, as the DBA

	// Roles belong to the whole server: unique names, dropped at the end,
	// after the schemas holding what they own or were granted.
	_, cat := dbtest.Schema(t)
	suffix := strings.TrimPrefix(cat, "t_")
	reader, owner, out := "assort_rd_"+suffix, "assort_own_"+suffix, cat+"_out"
	t.Cleanup(func() {
		dropCtx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		conn, err := pgx.Connect(dropCtx, dbtest.URL(t))
		if err != nil {
			t.Errorf("drop roles: %v", err)
			return
		}
		defer conn.Close(dropCtx)
		for _, s := range []string{out, cat} { // dbtest's own DROP of cat then finds nothing
			if _, err := conn.Exec(dropCtx, "DROP SCHEMA IF EXISTS "+pgx.Identifier{s}.Sanitize()+" CASCADE"); err != nil {
				t.Errorf("drop schema %s: %v", s, err)
			}
		}
		// DROP OWNED takes what the schemas did not hold: large objects,
		// should a query have left some.
		for _, role := range []string{owner, reader} {
			var exists bool
			if err := conn.QueryRow(dropCtx, "SELECT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = $1)", role).Scan(&exists); err != nil {
				t.Errorf("drop role %s: %v", role, err)
				continue
			}
			if !exists {
				continue
			}
			id := pgx.Identifier{role}.Sanitize()
			if _, err := conn.Exec(dropCtx, "DROP OWNED BY "+id+"; DROP ROLE "+id); err != nil {
				t.Errorf("drop role %s: %v", role, err)
			}
		}
	})
	src := pgx.Identifier{cat, "sources"}.Sanitize()
	mustExec(t, admin, "CREATE TABLE "+src+" (id bigint PRIMARY KEY, a float8, b float8)")
	mustExec(t, admin, "INSERT INTO "+src+" SELECT g, (g % 3) * 10 + sin(g), (g % 3) * -4 + cos(g) FROM generate_series(1, 300) g")
	// A function that writes, owned by the superuser and running with its
	// rights (SECURITY DEFINER): privileges cannot stop it, only the READ
	// ONLY transaction can.
	mustExec(t, admin, "CREATE FUNCTION "+pgx.Identifier{cat, "bump"}.Sanitize()+"() RETURNS float8 LANGUAGE sql SECURITY DEFINER AS $$ INSERT INTO "+
		src+" VALUES (100000 + (random() * 1000)::int, 0, 0) RETURNING a $$")
	canary := func() string {
		var s string
		if err := admin.QueryRow(ctx, "SELECT count(*) || '/' || sum(id) || '/' || round(sum(a + b)::numeric, 6) FROM "+src).Scan(&s); err != nil {
			t.Fatal(err)
		}
		return s
	}
	before := canary()

	doc, err := os.ReadFile(filepath.Join("..", "..", "docs", "least-privilege.sql"))
	if err != nil {
		t.Fatal(err)
	}
	setup := string(doc)
	for _, r := range [][2]string{
		{"assort_reader", reader},
		{"assort_owner", owner},
		{"survey.sources", src},
		{"SCHEMA survey", "SCHEMA " + pgx.Identifier{cat}.Sanitize()},
		{"CREATE SCHEMA assort AUTHORIZATION", "CREATE SCHEMA " + pgx.Identifier{out}.Sanitize() + " AUTHORIZATION"},
	} {
		if !strings.Contains(setup, r[0]) {
			t.Fatalf("docs/least-privilege.sql no longer contains %q; update this test with it", r[0])
		}
		setup = strings.ReplaceAll(setup, r[0], r[1])
	}
	mustExec(t, admin, setup) // one simple-protocol batch: one transaction, as psql -1

	// The owner is what the file promises: not a superuser, no CREATE on
	// the database, owner of the output schema only.
	var super, createDB bool
	var schemaOwner string
	if err := admin.QueryRow(ctx, `SELECT rolsuper, has_database_privilege($1, current_database(), 'CREATE'),
		(SELECT nspowner::regrole::text FROM pg_namespace WHERE nspname = $2) FROM pg_roles WHERE rolname = $1`, owner, out).Scan(&super, &createDB, &schemaOwner); err != nil {
		t.Fatal(err)
	}
	if super || createDB || schemaOwner != owner {
		t.Fatalf("owner role: superuser %v, CREATE on the database %v, output schema owned by %s", super, createDB, schemaOwner)
	}

	u, err := url.Parse(dbtest.URL(t))
	if err != nil {
		t.Fatal(err)
	}
	u.User = url.User(owner) // trust authentication: no password
	asOwner := u.String()
	query := "SELECT id, a, b FROM " + src
	fitArgs := func(q string, extra ...string) []string {
		return append([]string{"fit", "groups", "--query", q, "--key", "id", "--k", "3", "-d", asOwner, "--schema", out, "-q"}, extra...)
	}

	// migrate, fit, publish.
	mustAssort(t, "migrate", "-q", "-d", asOwner, "--schema", out)
	mustAssort(t, fitArgs(query)...)
	mustAssort(t, fitArgs(query+" WHERE id <= 150", "--no-publish")...)
	mustAssort(t, "publish", "groups@2", "-q", "-d", asOwner, "--schema", out)
	var rows int
	var runBy, tableOwner string
	if err := admin.QueryRow(ctx, "SELECT (SELECT count(*) FROM "+pgx.Identifier{out, "groups"}.Sanitize()+"), run_by, (SELECT relowner::regrole::text FROM pg_class WHERE oid = $1::regclass) FROM "+
		pgx.Identifier{out, "models"}.Sanitize()+" WHERE name = 'groups' AND version = 2", pgx.Identifier{out, "groups_v2"}.Sanitize()).Scan(&rows, &runBy, &tableOwner); err != nil {
		t.Fatal(err)
	}
	if rows != 150 || runBy != owner || tableOwner != owner {
		t.Errorf("published view shows %d rows (want 150), run by %s, result table owned by %s (want %s for both)", rows, runBy, tableOwner, owner)
	}

	// Queries that try to write.
	var largeObjects int
	if err := admin.QueryRow(ctx, "SELECT count(*) FROM pg_largeobject_metadata").Scan(&largeObjects); err != nil {
		t.Fatal(err)
	}
	writes := []struct {
		name  string
		query string
		code  int
		msg   string
	}{
		// Refused by READ ONLY (the function's own rights would allow it).
		{"function that inserts", "SELECT id, a, " + pgx.Identifier{cat, "bump"}.Sanitize() + "() AS b FROM " + src,
			exitFailure, "cannot execute INSERT in a read-only transaction"},
		// Row locks are writes too.
		{"row locks", query + " FOR UPDATE", exitFailure, "cannot execute SELECT FOR UPDATE in a read-only transaction"},
		// assort wraps the query in COPY (SELECT ... FROM (query) AS q), where
		// the server refuses a data-modifying WITH before READ ONLY could.
		{"data-modifying WITH", "WITH x AS (INSERT INTO " + src + " VALUES (999999, 1, 1) RETURNING *) SELECT id, a, b FROM x",
			exitFailure, "data-modifying statement must be at the top level"},
		// lo_create is not refused in a READ ONLY transaction (PostgreSQL
		// 15); the run succeeds, but nothing the query did may outlive it.
		{"large object", "SELECT id, a + 0 * lo_create(0)::bigint AS a, b FROM " + src, exitOK, ""},
	}
	for _, c := range writes {
		t.Run(c.name, func(t *testing.T) {
			code, _, stderr := assort(t, fitArgs(c.query, "--no-publish")...)
			if code != c.code || !strings.Contains(stderr, c.msg) {
				t.Errorf("exit %d, want %d with %q; stderr:\n%s", code, c.code, c.msg, stderr)
			}
			if got := canary(); got != before {
				t.Errorf("catalogue table changed: %s, was %s", got, before)
			}
			var n int
			if err := admin.QueryRow(ctx, "SELECT count(*) FROM pg_largeobject_metadata").Scan(&n); err != nil {
				t.Fatal(err)
			}
			if n != largeObjects {
				t.Errorf("%d large objects made by the query outlived the run: the read transaction must end in ROLLBACK, not COMMIT", n-largeObjects)
			}
		})
	}

	// Writing into the catalogue as the owner role is refused by the
	// privileges, whether by hand or by asking assort to put its registry
	// there; so is making a schema of its own.
	owned, err := pgx.Connect(ctx, asOwner)
	if err != nil {
		t.Fatal(err)
	}
	defer owned.Close(context.WithoutCancel(ctx))
	denied := []struct{ name, sql, msg string }{
		{"insert into the catalogue", "INSERT INTO " + src + " VALUES (424242, 1, 1)", "permission denied for table sources"},
		{"create a table in the catalogue schema", "CREATE TABLE " + pgx.Identifier{cat, "scratch"}.Sanitize() + " (a int)", "permission denied for schema " + cat},
		{"create a schema", "CREATE SCHEMA " + pgx.Identifier{out + "_x"}.Sanitize(), "permission denied for database"},
	}
	for _, c := range denied {
		_, err := owned.Exec(ctx, c.sql)
		var pgErr *pgconn.PgError
		// 42501 is insufficient_privilege (PostgreSQL documentation,
		// Appendix A).
		if !errors.As(err, &pgErr) || pgErr.Code != "42501" || !strings.Contains(pgErr.Message, c.msg) {
			t.Errorf("%s: got %v, want SQLSTATE 42501 %q", c.name, err, c.msg)
		}
	}
	code, _, stderr := assort(t, "migrate", "-d", asOwner, "--schema", cat)
	if code != exitFailure || !strings.Contains(stderr, "permission denied") {
		t.Errorf("migrate into the catalogue schema: exit %d, want %d with permission denied; stderr:\n%s", code, exitFailure, stderr)
	}
	if got := canary(); got != before {
		t.Errorf("catalogue table changed: %s, was %s", got, before)
	}
	var extra int
	if err := admin.QueryRow(ctx, "SELECT count(*) FROM pg_class WHERE relnamespace = $1::regnamespace AND relname NOT IN ('sources', 'sources_pkey')", cat).Scan(&extra); err != nil {
		t.Fatal(err)
	}
	if extra != 0 {
		t.Errorf("%d relations appeared in the catalogue schema", extra)
	}
}

// mustExec runs sql on conn and fails the test on error.
func mustExec(t *testing.T, conn *pgx.Conn, sql string) {
	t.Helper()
	if _, err := conn.Exec(t.Context(), sql); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
}
