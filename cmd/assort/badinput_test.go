package main

import (
	"fmt"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"assort/dbio/dbtest"
	"assort/schema"
)

// TestFitBadInput runs fit with each kind of bad input and checks the exit
// status, the message, and that nothing was written: no registry row and
// no relation beyond those the test made.
func TestFitBadInput(t *testing.T) {
	w := newWorkspace(t)
	w.exec(t, "CREATE TABLE "+w.table("src")+` (id bigint, label text, a float8, b numeric, c int)`)
	w.exec(t, "INSERT INTO "+w.table("src")+` SELECT g, 'row ' || g, g * 1.5, g % 7, g % 3 FROM generate_series(1, 40) g`)
	w.exec(t, "CREATE TABLE "+w.table("holes")+` (id bigint, a float8, b float8)`)
	w.exec(t, "INSERT INTO "+w.table("holes")+` VALUES (1, 1, 2), (2, NULL, 3), (3, 4, 'NaN'), (4, 'Infinity', 1), (5, 5, 6), (6, 7, 8)`)
	w.exec(t, "CREATE TABLE "+w.table("dups")+` (id bigint, a float8)`)
	w.exec(t, "INSERT INTO "+w.table("dups")+` VALUES (1, 1), (2, 2), (1042, 3), (1042, 4), (5, 5)`)
	w.exec(t, "CREATE TABLE "+w.table("nullkey")+` (id bigint, a float8)`)
	w.exec(t, "INSERT INTO "+w.table("nullkey")+` VALUES (1, 1), (NULL, 2), (3, 3)`)
	src := "SELECT id, a, b, c FROM " + w.table("src")

	cases := []struct {
		name string
		args []string
		code int
		msg  []string // each must appear in stderr
	}{
		{"server rejects query", []string{"fit", "m", "--query", "SELECT id, a FROM " + w.table("src") + " WHER id > 1", "--key", "id", "--k", "2"},
			exitFailure, []string{"syntax error", "line 1, column 51", "WHER id"}},
		{"feature not numeric", []string{"fit", "m", "--query", "SELECT id, label, a FROM " + w.table("src"), "--key", "id", "--k", "2"},
			exitFailure, []string{`"label"`, "text"}},
		{"unknown feature", []string{"fit", "m", "--query", src, "--key", "id", "--features", "a,zz", "--k", "2"},
			exitFailure, []string{`"zz"`}},
		{"unknown key", []string{"fit", "m", "--query", src, "--key", "ident", "--k", "2"},
			exitFailure, []string{`"ident"`}},
		{"no rows", []string{"fit", "m", "--query", src + " WHERE false", "--key", "id", "--k", "2"},
			exitFailure, []string{"no rows"}},
		{"k below 1", []string{"fit", "m", "--query", src, "--key", "id", "--k", "0"},
			exitUsage, []string{"--k", "k must be at least 1"}},
		{"k range reversed", []string{"fit", "m", "--query", src, "--key", "id", "--k", "5:2"},
			exitUsage, []string{"--k", `"5:2"`}},
		{"k range from zero", []string{"fit", "m", "--query", src, "--key", "id", "--k", "0:3"},
			exitUsage, []string{"--k", "k must be at least 1"}},
		{"k empty", []string{"fit", "m", "--query", src, "--key", "id", "--k", ""},
			exitUsage, []string{"--k is required"}},
		{"k range above rows", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2:50"},
			exitFailure, []string{"the largest candidate, 50, is more than the 40 usable rows"}},
		{"unknown criterion", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2:4", "--criterion", "gap"},
			exitUsage, []string{"--criterion", `"gap"`}},
		{"criterion of the other method", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2:4", "--criterion", "icl"},
			exitUsage, []string{"--criterion icl applies to --method gmm only"}},
		{"k above rows", []string{"fit", "m", "--query", src, "--key", "id", "--k", "41"},
			exitFailure, []string{"--k 41", "40 usable rows"}},
		{"duplicate key", []string{"fit", "m", "--query", "SELECT id, a FROM " + w.table("dups"), "--key", "id", "--k", "2"},
			exitFailure, []string{`key column "id" is not unique`, "1042"}},
		{"null key", []string{"fit", "m", "--query", "SELECT id, a FROM " + w.table("nullkey"), "--key", "id", "--k", "2"},
			exitFailure, []string{"row 2", "NULL"}},
		{"null feature", []string{"fit", "m", "--query", "SELECT id, a, b FROM " + w.table("holes"), "--key", "id", "--k", "2"},
			exitFailure, []string{"row 2", "key 2", `"a"`, "NULL"}},
		{"nan feature", []string{"fit", "m", "--query", "SELECT id, a, b FROM " + w.table("holes") + " WHERE id <> 2", "--key", "id", "--k", "2"},
			exitFailure, []string{"key 3", `"b"`, "NaN"}},
		{"infinite feature", []string{"fit", "m", "--query", "SELECT id, a, b FROM " + w.table("holes") + " WHERE id > 3", "--key", "id", "--k", "2"},
			exitFailure, []string{"key 4", `"a"`, "infinite"}},
		{"bad model name", []string{"fit", "Bad-Name", "--query", src, "--key", "id", "--k", "2"},
			exitUsage, []string{`model name "Bad-Name"`}},
		{"model name of a registry table", []string{"fit", "models", "--query", src, "--key", "id", "--k", "2"},
			exitUsage, []string{"registry table"}},
		{"model name like a version table", []string{"fit", "m_v2", "--query", src, "--key", "id", "--k", "2"},
			exitUsage, []string{"version table"}},
		{"unknown flag", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2", "--clusters", "3"},
			exitUsage, []string{"unknown flag: --clusters"}},
		{"negative tolerance", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2", "--tol", "-1"},
			exitUsage, []string{"--tol"}},
		{"unknown scaling", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2", "--scale", "minmax"},
			exitUsage, []string{"--scale", "minmax"}},
		{"unknown missing policy", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2", "--missing", "zero"},
			exitUsage, []string{"--missing"}},
		{"unknown method", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2", "--method", "dbscan"},
			exitUsage, []string{"--method"}},
		{"key collides with a result column", []string{"fit", "m", "--query", "SELECT id AS cluster, a FROM " + w.table("src"), "--key", "cluster", "--k", "2"},
			exitFailure, []string{`key column "cluster"`}},
		{"model name of an existing table", []string{"fit", "src", "--query", src, "--key", "id", "--k", "2"},
			exitFailure, []string{"is not a view"}},
		{"no model name", []string{"fit", "--query", src, "--key", "id", "--k", "2"},
			exitUsage, []string{"one model name"}},
	}
	before := relations(t, w)
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			code, _, stderr := assort(t, w.args(c.args...)...)
			if code != c.code {
				t.Errorf("exit %d, want %d; stderr:\n%s", code, c.code, stderr)
			}
			for _, m := range c.msg {
				if !strings.Contains(stderr, m) {
					t.Errorf("stderr lacks %q:\n%s", m, stderr)
				}
			}
			assertNothingWritten(t, w, before)
		})
	}
}

// TestFitSkipsMissing counts rows with NULL, NaN or infinite features in
// rows_skipped under --missing skip and fits the rest.
func TestFitSkipsMissing(t *testing.T) {
	w := newWorkspace(t)
	w.exec(t, "CREATE TABLE "+w.table("holes")+` (id bigint, a float8, b float8)`)
	w.exec(t, "INSERT INTO "+w.table("holes")+` VALUES (1, 1, 2), (2, NULL, 3), (3, 4, 'NaN'), (4, 'Infinity', 1), (5, 5, 6), (6, 7, 8)`)
	mustAssort(t, w.args("fit", "m", "--query", "SELECT id, a, b FROM "+w.table("holes"), "--key", "id", "--k", "2", "--missing", "skip")...)
	var read, used, skipped, inTable int
	if err := w.conn.QueryRow(t.Context(), "SELECT rows_read, rows_used, rows_skipped, (SELECT count(*) FROM "+w.table("m")+") FROM "+w.table("models")).Scan(&read, &used, &skipped, &inTable); err != nil {
		t.Fatal(err)
	}
	if read != 6 || used != 3 || skipped != 3 || inTable != 3 {
		t.Fatalf("read %d, used %d, skipped %d, in table %d; want 6, 3, 3, 3", read, used, skipped, inTable)
	}
}

// TestFitNeedsCurrentRegistry refuses to fit without a current registry,
// naming the command that makes one, and migrate is idempotent.
func TestFitNeedsCurrentRegistry(t *testing.T) {
	url, s := dbtest.Schema(t)
	fitArgs := []string{"fit", "m", "--query", "SELECT 1 AS id, 2.0 AS a", "--key", "id", "--k", "1", "-d", url, "--schema", s}
	code, _, stderr := assort(t, fitArgs...)
	if code != exitFailure || !strings.Contains(stderr, "no registry in schema "+s+"; run `assort migrate`") {
		t.Fatalf("without a registry: exit %d, stderr:\n%s", code, stderr)
	}
	mustAssort(t, "migrate", "-q", "-d", url, "--schema", s)
	code, _, stderr = assort(t, "migrate", "-d", url, "--schema", s)
	if code != 0 || !strings.Contains(stderr, "up to date") {
		t.Fatalf("second migrate: exit %d, stderr:\n%s", code, stderr)
	}
	// A registry one migration behind is refused too.
	conn := dbtest.Conn(t)
	if _, err := conn.Exec(t.Context(), "DELETE FROM "+pgx.Identifier{s, "migrations"}.Sanitize()+" WHERE version = $1", schema.Latest()); err != nil {
		t.Fatal(err)
	}
	code, _, stderr = assort(t, fitArgs...)
	want := fmt.Sprintf("is at migration %d, this assort needs %d; run `assort migrate`", schema.Latest()-1, schema.Latest())
	if code != exitFailure || !strings.Contains(stderr, want) {
		t.Fatalf("outdated registry: exit %d, stderr:\n%s", code, stderr)
	}
}

// relations lists the workspace schema's relations with their kinds.
func relations(t *testing.T, w *workspace) string {
	t.Helper()
	var s string
	w.scalar(t, `SELECT coalesce(string_agg(relname || ':' || relkind::text, ',' ORDER BY relname), '')
		FROM pg_class WHERE relnamespace = $1::regnamespace AND relkind IN ('r', 'v', 'm', 'p')`, &s, w.schema)
	return s
}

func assertNothingWritten(t *testing.T, w *workspace, before string) {
	t.Helper()
	if after := relations(t, w); after != before {
		t.Errorf("relations changed:\nbefore %s\nafter  %s", before, after)
	}
	var n int
	w.scalar(t, "SELECT (SELECT count(*) FROM "+w.table("models")+") + (SELECT count(*) FROM "+w.table("components")+") + (SELECT count(*) FROM "+w.table("publications")+")", &n)
	if n != 0 {
		t.Errorf("%d registry rows written", n)
	}
}

// TestKMeansAlgorithms fits the same rows with each k-means algorithm and
// seeding the flags offer: Hamerly's bounds give plain Lloyd's result
// exactly, and the records say what ran.
func TestKMeansAlgorithms(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{300, 200, 100}, 13)
	q := "SELECT id, x, y FROM " + w.table("pts")
	for _, alg := range []string{"lloyd", "hamerly", "minibatch"} {
		mustAssort(t, w.args("fit", "alg_"+alg, "--query", q, "--key", "id", "--k", "3", "--algorithm", alg, "--seeding", "kmeans||")...)
		var got string
		w.scalar(t, "SELECT algorithm FROM "+w.table("models")+" WHERE name = $1", &got, "alg_"+alg)
		if got != alg+", kmeans|| seeding" {
			t.Errorf("--algorithm %s recorded %q", alg, got)
		}
	}
	var lloyd, hamerly, mini float64
	w.scalar(t, "SELECT inertia FROM "+w.table("models")+" WHERE name = 'alg_lloyd'", &lloyd)
	w.scalar(t, "SELECT inertia FROM "+w.table("models")+" WHERE name = 'alg_hamerly'", &hamerly)
	w.scalar(t, "SELECT inertia FROM "+w.table("models")+" WHERE name = 'alg_minibatch'", &mini)
	if hamerly != lloyd || mini > 1.01*lloyd {
		t.Errorf("inertia: lloyd %v, hamerly %v (want equal), minibatch %v (want within 1%%)", lloyd, hamerly, mini)
	}
	var diff int
	w.scalar(t, "SELECT count(*) FROM "+w.table("alg_lloyd")+" a JOIN "+w.table("alg_hamerly")+" b USING (id) WHERE a.cluster <> b.cluster OR a.distance <> b.distance", &diff)
	if diff != 0 {
		t.Errorf("%d rows differ between lloyd and hamerly", diff)
	}
	for _, bad := range [][]string{{"--algorithm", "elkan"}, {"--seeding", "random"}, {"--method", "gmm", "--algorithm", "lloyd"}} {
		code, _, stderr := assort(t, w.args(append([]string{"fit", "x", "--query", q, "--key", "id", "--k", "3"}, bad...)...)...)
		if code != exitUsage || !strings.Contains(stderr, bad[len(bad)-2]) {
			t.Errorf("%v: exit %d, stderr:\n%s", bad, code, stderr)
		}
	}
}
