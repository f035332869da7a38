package main

import (
	"fmt"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"
)

// canary makes a table that no run may touch, and returns a check of it.
func canary(t *testing.T, w *workspace) func(t *testing.T) {
	t.Helper()
	w.exec(t, "CREATE TABLE "+w.table("canary")+" (id int PRIMARY KEY, note text)")
	w.exec(t, "INSERT INTO "+w.table("canary")+" VALUES (1, 'a'), (2, 'b'), (3, 'c')")
	return func(t *testing.T) {
		t.Helper()
		var s string
		w.scalar(t, "SELECT coalesce((SELECT string_agg(id || note, ',' ORDER BY id) FROM "+w.table("canary")+"), 'gone')", &s)
		if s != "1a,2b,3c" {
			t.Errorf("canary table changed: %s", s)
		}
	}
}

// TestInjectionNamesRejected gives model names and schema names outside
// the documented patterns (model: lower-case letters, digits and
// underscores, starting with a letter, at most 40; schema: the same, at
// most 63, not pg_) to every command that takes them. Each is refused with
// status 2 and a message quoting the name, before any connection is made:
// the same command with a database that cannot be reached gives the same
// refusal, and the real database is left as it was.
func TestInjectionNamesRejected(t *testing.T) {
	w := newWorkspace(t)
	check := canary(t, w)
	w.blobs(t, "pts", []int{10, 10}, 1)
	before := relations(t, w)
	// Port 1 on the loopback: nothing listens there.
	const unreachable = "postgres://nobody@127.0.0.1:1/none?sslmode=disable&connect_timeout=2"
	query := "SELECT id, x, y FROM " + w.table("pts")

	badModels := []string{
		"m; DROP TABLE canary; --",
		`m"; DROP TABLE canary; --`,
		"m'; DROP TABLE canary; --",
		"größe",
		"with space",
		"Upper",
		"m-x",
		"m\x00x",
		"",
		strings.Repeat("m", 41),
	}
	badSchemas := []string{
		"public; DROP TABLE canary; --",
		`"quoted"`,
		"Assort",
		"pg_catalog",
		"größe",
		"a b",
		"",
		strings.Repeat("s", 64),
	}
	type attempt struct {
		name string
		args []string // without -d
		msg  string
	}
	var attempts []attempt
	for _, m := range badModels {
		if m != "" { // models "" lists every model, as models without a name
			attempts = append(attempts, attempt{fmt.Sprintf("models %q", m), []string{"models", m, "--schema", w.schema}, fmt.Sprintf("model name %q", m)})
		}
		msg := fmt.Sprintf("model name %q", m)
		for _, args := range [][]string{
			{"fit", m, "--query", query, "--key", "id", "--k", "2", "--schema", w.schema},
			{"show", m, "--schema", w.schema},
			{"show", m + "@1", "--schema", w.schema},
			{"publish", m + "@1", "--schema", w.schema},
			{"prune", m, "--keep", "1", "--schema", w.schema},
			{"drop", m, "--schema", w.schema},
		} {
			attempts = append(attempts, attempt{fmt.Sprintf("%s %q", args[0], args[1]), args, msg})
		}
	}
	for _, s := range badSchemas {
		msg := fmt.Sprintf("--schema: schema name %q", s)
		for _, args := range [][]string{
			{"migrate", "--schema", s},
			{"fit", "m", "--query", query, "--key", "id", "--k", "2", "--schema", s},
			{"models", "--schema", s},
			{"show", "m", "--schema", s},
			{"publish", "m@1", "--schema", s},
			{"drop", "m", "--schema", s},
		} {
			attempts = append(attempts, attempt{fmt.Sprintf("%s --schema %q", args[0], s), args, msg})
		}
	}
	for _, a := range attempts {
		t.Run(a.name, func(t *testing.T) {
			for _, db := range []string{w.url, unreachable} {
				code, _, stderr := assort(t, append(a.args, "-d", db)...)
				if code != exitUsage || !strings.Contains(stderr, a.msg) {
					t.Errorf("with -d %s: exit %d, want %d with %q; stderr:\n%s", db, code, exitUsage, a.msg, stderr)
				}
			}
		})
	}
	check(t)
	assertNothingWritten(t, w, before)
}

// TestInjectionQueryStaysOneStatement tries to end the --query early and
// run a second statement. The query is described on its own as one
// prepared statement (which cannot hold two) before it is wrapped in COPY,
// and runs inside a READ ONLY transaction, so each attempt fails with
// status 1 and writes nothing.
func TestInjectionQueryStaysOneStatement(t *testing.T) {
	w := newWorkspace(t)
	check := canary(t, w)
	w.blobs(t, "pts", []int{10, 10}, 1)
	before := relations(t, w)
	pts := w.table("pts")
	drop := "DROP TABLE " + w.table("canary")
	cases := []struct {
		name, query, msg string
	}{
		{"second statement", "SELECT id, x, y FROM " + pts + "; " + drop, "cannot insert multiple commands into a prepared statement"},
		{"second statement after a comment", "SELECT id, x, y FROM " + pts + " /* c */; " + drop + "; --", "cannot insert multiple commands into a prepared statement"},
		{"closing the wrapper", "SELECT id, x, y FROM " + pts + ") AS q) TO STDOUT (FORMAT binary); " + drop + "; --", "syntax error"},
		{"open comment", "SELECT id, x, y FROM " + pts + " /*", "unterminated /* comment"},
		{"open string", "SELECT id, x, y FROM " + pts + " WHERE 'a' = 'a", "unterminated quoted string"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			code, _, stderr := assort(t, w.args("fit", "m", "--query", c.query, "--key", "id", "--k", "2")...)
			if code != exitFailure || !strings.Contains(stderr, c.msg) {
				t.Errorf("exit %d, want %d with %q; stderr:\n%s", code, exitFailure, c.msg, stderr)
			}
			check(t)
			assertNothingWritten(t, w, before)
		})
	}
}

// TestInjectionColumnNamesWork fits queries whose key and feature columns
// have names that need quoting: a double quote with a semicolon and an SQL
// comment, non-ASCII letters, reserved words, spaces, capitals; and a key
// of an enum type whose own name needs quoting. Every fit succeeds, the
// result table's key column has exactly the query's name and type, the
// registry records the names as given, and the canary table is untouched.
func TestInjectionColumnNamesWork(t *testing.T) {
	w := newWorkspace(t)
	check := canary(t, w)
	const weird = `we"ird; DROP TABLE canary; --`
	kind := pgx.Identifier{w.schema, `key kind"; DROP TABLE canary; --`}.Sanitize()
	w.exec(t, "CREATE TYPE "+kind+" AS ENUM ('north', 'south', 'east', 'west', 'up', 'down')")
	src := w.table("odd names")
	w.exec(t, "CREATE TABLE "+src+` ("we""ird; DROP TABLE canary; --" bigint PRIMARY KEY, "select" bigint UNIQUE, "größe" float8, "with space" float8, "Upper" float8, "semi;colon" float8, "kind" `+kind+`)`)
	w.exec(t, "INSERT INTO "+src+` SELECT g, 1000 + g, (g % 2) * 10 + sin(g), (g % 2) * 5 + cos(g), sin(3 * g), cos(5 * g),
		(enum_range(NULL::`+kind+`))[g] FROM generate_series(1, 60) g`)
	w.exec(t, "CREATE TABLE "+w.table("directions")+" (k "+kind+" PRIMARY KEY, a float8, b float8)")
	w.exec(t, "INSERT INTO "+w.table("directions")+" SELECT k, i % 2 * 10 + i * 0.1, i % 2 FROM unnest(enum_range(NULL::"+kind+")) WITH ORDINALITY AS e(k, i)")

	cases := []struct {
		model    string
		args     []string
		key      string
		keyType  string
		features []string
		rows     int
	}{
		{"weird", []string{"--query", `SELECT "we""ird; DROP TABLE canary; --", "größe", "with space", "Upper", "semi;colon" FROM ` + src, "--key", weird, "--k", "2"},
			weird, "bigint", []string{"größe", "with space", "Upper", "semi;colon"}, 60},
		// A reserved word as model name (it fits the pattern) and as key,
		// through a mixture, which writes a memberships table too.
		{"select", []string{"--query", `SELECT "select", "größe", "with space" FROM ` + src, "--key", "select", "--features", "größe,with space", "--k", "2", "--method", "gmm"},
			"select", "bigint", []string{"größe", "with space"}, 60},
		{"bykind", []string{"--query", "SELECT k, a, b FROM " + w.table("directions"), "--key", "k", "--k", "2"},
			"k", kind, []string{"a", "b"}, 6},
	}
	for _, c := range cases {
		t.Run(c.model, func(t *testing.T) {
			mustAssort(t, w.args(append([]string{"fit", c.model}, c.args...)...)...)
			check(t)
			tables := []string{c.model + "_v1"}
			if c.model == "select" {
				tables = append(tables, c.model+"_v1_memberships")
			}
			for _, table := range tables {
				var name, typ string
				var sameType bool
				if err := w.conn.QueryRow(t.Context(), `SELECT attname, format_type(atttypid, atttypmod), atttypid = $2::regtype
					FROM pg_attribute WHERE attrelid = $1::regclass AND attnum = 1`,
					pgx.Identifier{w.schema, table}.Sanitize(), c.keyType).Scan(&name, &typ, &sameType); err != nil {
					t.Fatal(err)
				}
				if name != c.key || !sameType {
					t.Errorf("%s: first column %q of type %s, want %q of type %s", table, name, typ, c.key, c.keyType)
				}
			}
			var keyColumn string
			var features []string
			if err := w.conn.QueryRow(t.Context(), "SELECT key_column, features FROM "+w.table("models")+" WHERE name = $1", c.model).Scan(&keyColumn, &features); err != nil {
				t.Fatal(err)
			}
			if keyColumn != c.key || strings.Join(features, "|") != strings.Join(c.features, "|") {
				t.Errorf("registry: key %q, features %q; want %q, %q", keyColumn, features, c.key, c.features)
			}
			// The stable view joins back on the key.
			var joined int
			k := pgx.Identifier{c.key}.Sanitize()
			from := src
			if c.model == "bykind" {
				from = w.table("directions")
			}
			w.scalar(t, "SELECT count(*) FROM "+from+" s JOIN "+w.table(c.model)+" r ON r."+k+" = s."+k, &joined)
			if joined != c.rows {
				t.Errorf("the view joins back %d rows, want %d", joined, c.rows)
			}
		})
	}
}
