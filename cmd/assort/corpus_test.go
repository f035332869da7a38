package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestBadInputCorpus runs every bad input the project names, for every
// command that writes or reads, against one prepared database, and checks
// after each one the exit status, the message, and that nothing was
// written: the relations and functions of the schema and the rows of every
// registry table are exactly as before.
func TestBadInputCorpus(t *testing.T) {
	w := newWorkspace(t)
	// Catalogue tables.
	w.exec(t, "CREATE TABLE "+w.table("src")+` (id bigint, label text, a float8, b numeric, c int)`)
	w.exec(t, "INSERT INTO "+w.table("src")+` SELECT g, 'row ' || g, g * 1.5, g % 7, g % 3 FROM generate_series(1, 40) g`)
	w.exec(t, "CREATE TABLE "+w.table("holes")+` (id bigint, a float8, b float8)`)
	w.exec(t, "INSERT INTO "+w.table("holes")+` VALUES (1, 1, 2), (2, NULL, 3), (3, 4, 'NaN'), (4, 'Infinity', 1), (5, 5, 6), (6, 7, 8)`)
	w.exec(t, "CREATE TABLE "+w.table("dups")+` (id bigint, a float8)`)
	w.exec(t, "INSERT INTO "+w.table("dups")+` VALUES (1, 1), (2, 2), (1042, 3), (1042, 4), (5, 5)`)
	w.exec(t, "CREATE TABLE "+w.table("nullkey")+` (id bigint, a float8)`)
	w.exec(t, "INSERT INTO "+w.table("nullkey")+` VALUES (1, 1), (NULL, 2), (3, 3)`)
	w.exec(t, "CREATE TABLE "+w.table("same")+" AS SELECT g AS id, 1.0::float8 AS x, 2.0::float8 AS y FROM generate_series(1, 30) g")
	w.blobs(t, "pts", []int{20, 20}, 2)
	w.exec(t, "CREATE TABLE "+w.table("words")+" AS SELECT id, x::text AS x, y FROM "+w.table("pts"))
	w.exec(t, "CREATE TABLE "+w.table("lab")+" (id bigint, a text, b text)")
	w.exec(t, "INSERT INTO "+w.table("lab")+" VALUES (5000, 'x', 'y'), (5001, 'y', 'z'), (5001, 'y', 'z')")
	w.overlapping(t, "wide", 2000)

	// Models in every state: sc@1 published, sc@2 pruned, sc@3 ready,
	// sc@4 failed (a killed run found by the next), sc@5 running.
	pts := "SELECT id, x, y FROM " + w.table("pts")
	mustAssort(t, w.args("fit", "sc", "--query", pts, "--key", "id", "--k", "2")...)
	mustAssort(t, w.args("fit", "sc", "--query", pts, "--key", "id", "--k", "2", "--no-publish")...)
	mustAssort(t, w.args("fit", "sc", "--query", pts, "--key", "id", "--k", "2", "--no-publish")...)
	mustAssort(t, w.args("prune", "sc", "--keep", "1")...)
	mustAssort(t, w.args("fit", "sc", "--query", pts, "--key", "id", "--k", "2", "--no-publish")...)
	w.exec(t, "UPDATE "+w.table("models")+" SET status = 'failed' WHERE name = 'sc' AND version = 4")
	w.exec(t, "INSERT INTO "+w.table("models")+` (name, version, status, method, k, features, key_column, key_type, query, scale, seed, restarts, max_iter, tol, tool_version)
		SELECT name, 5, 'running', method, k, features, key_column, key_type, query, scale, seed, restarts, max_iter, tol, tool_version FROM `+w.table("models")+" WHERE name = 'sc' AND version = 1")

	file := filepath.Join(t.TempDir(), "plain-file")
	if err := os.WriteFile(file, []byte("x"), 0o600); err != nil {
		t.Fatal(err)
	}
	notDir := filepath.Join(file, "sub")

	src := "SELECT id, a, b, c FROM " + w.table("src")
	fit := func(extra ...string) []string {
		return append([]string{"fit", "m", "--query", src, "--key", "id"}, extra...)
	}
	gmm := func(extra ...string) []string {
		return append([]string{"fit", "m", "--query", pts, "--key", "id", "--method", "gmm", "--k", "2"}, extra...)
	}
	wide := func(extra ...string) []string {
		return append([]string{"fit", "m", "--query", "SELECT id, f1, f2, f3, f4 FROM " + w.table("wide"), "--key", "id", "--k", "3"}, extra...)
	}
	cases := []struct {
		name string
		args []string
		code int
		msg  []string // each must appear in stderr
	}{
		// The first slice: fit.
		{"server rejects query", []string{"fit", "m", "--query", "SELECT id, a FROM " + w.table("src") + " WHER id > 1", "--key", "id", "--k", "2"},
			exitFailure, []string{"syntax error", "line 1, column 51", "WHER id"}},
		{"feature not numeric", []string{"fit", "m", "--query", "SELECT id, label, a FROM " + w.table("src"), "--key", "id", "--k", "2"},
			exitFailure, []string{`"label"`, "text"}},
		{"unknown feature", fit("--features", "a,zz", "--k", "2"), exitFailure, []string{`"zz"`}},
		{"unknown key", []string{"fit", "m", "--query", src, "--key", "ident", "--k", "2"}, exitFailure, []string{`"ident"`}},
		{"no rows", []string{"fit", "m", "--query", src + " WHERE false", "--key", "id", "--k", "2"}, exitFailure, []string{"no rows"}},
		{"k below 1", fit("--k", "0"), exitUsage, []string{"--k", "k must be at least 1"}},
		{"k above rows", fit("--k", "41"), exitFailure, []string{"--k 41", "40 usable rows"}},
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
		{"bad model name", []string{"fit", "Bad-Name", "--query", src, "--key", "id", "--k", "2"}, exitUsage, []string{`model name "Bad-Name"`}},
		{"model name of a registry table", []string{"fit", "models", "--query", src, "--key", "id", "--k", "2"}, exitUsage, []string{"registry table"}},
		{"model name like a version table", []string{"fit", "m_v2", "--query", src, "--key", "id", "--k", "2"}, exitUsage, []string{"version table"}},
		{"model name of an existing table", []string{"fit", "src", "--query", src, "--key", "id", "--k", "2"}, exitFailure, []string{"is not a view"}},
		{"unknown flag", fit("--k", "2", "--clusters", "3"), exitUsage, []string{"unknown flag: --clusters"}},
		{"negative tolerance", fit("--k", "2", "--tol", "-1"), exitUsage, []string{"--tol"}},
		{"unknown scaling", fit("--k", "2", "--scale", "minmax"), exitUsage, []string{"--scale", "minmax"}},
		{"unknown missing policy", fit("--k", "2", "--missing", "zero"), exitUsage, []string{"--missing"}},
		{"unknown method", fit("--k", "2", "--method", "dbscan"), exitUsage, []string{"--method"}},
		{"key collides with a result column", []string{"fit", "m", "--query", "SELECT id AS cluster, a FROM " + w.table("src"), "--key", "cluster", "--k", "2"},
			exitFailure, []string{`key column "cluster"`}},
		{"no model name", []string{"fit", "--query", src, "--key", "id", "--k", "2"}, exitUsage, []string{"one model name"}},
		{"bad schema name", []string{"fit", "m", "--query", src, "--key", "id", "--k", "2", "--schema", `x"; drop`}, exitUsage, []string{"--schema"}},
		{"unknown algorithm", fit("--k", "2", "--algorithm", "elkan"), exitUsage, []string{"--algorithm"}},
		{"statement timeout", []string{"fit", "m", "--query", src + " WHERE pg_sleep(0.3) IS NOT NULL", "--key", "id", "--k", "2", "--statement-timeout", "100ms"},
			exitFailure, []string{"statement timeout"}},
		{"negative lock timeout", fit("--k", "2", "--lock-timeout", "-1s"), exitUsage, []string{"--lock-timeout"}},

		// Mixtures.
		{"unknown covariance", gmm("--covariance", "banded"), exitUsage, []string{"--covariance must be full, diag, spherical or pooled"}},
		{"negative reg", gmm("--reg", "-0.1"), exitUsage, []string{"--reg must be a non-negative number"}},
		{"floor of 1", gmm("--membership-floor", "1"), exitUsage, []string{"--membership-floor must be in [0, 1)"}},
		{"negative floor", gmm("--membership-floor", "-0.5"), exitUsage, []string{"--membership-floor must be in [0, 1)"}},
		{"k too large for full matrices", gmm("--k", "20"), exitFailure, []string{"20"}},
		{"all rows identical", []string{"fit", "m", "--query", "SELECT id, x, y FROM " + w.table("same"), "--key", "id", "--method", "gmm", "--k", "2"},
			exitFailure, []string{"identical"}},
		{"covariance with kmeans", fit("--k", "2", "--covariance", "diag"), exitUsage, []string{"--covariance applies to --method gmm only"}},

		// Tables larger than memory.
		{"memory too small", wide("--memory", "1MiB", "--workers", "2"), exitFailure, []string{"--memory 1 MiB is too small", "needs at least"}},
		{"memory not a size", wide("--memory", "lots"), exitUsage, []string{"--memory", `"lots"`}},
		{"memory zero", wide("--memory", "0"), exitUsage, []string{"--memory", "zero"}},
		{"unwritable spill dir", wide("--spill-dir", notDir), exitFailure, []string{"--spill-dir", notDir}},
		{"sample zero", wide("--sample", "0"), exitUsage, []string{"--sample must be at least 1 row, got 0"}},
		{"sample and fraction", wide("--sample", "10", "--sample-fraction", "0.5"), exitUsage, []string{"--sample and --sample-fraction", "give one"}},
		{"fraction above one", wide("--sample-fraction", "1.5"), exitUsage, []string{"--sample-fraction must be in (0, 1], got 1.5"}},
		{"sample beyond memory", wide("--sample", "1000000", "--memory", "16MiB"), exitFailure, []string{"--sample 1000000 needs", "more than --memory 16 MiB"}},
		{"score with too little memory", []string{"score", "sc", "--query", pts, "--memory", "256KiB"}, exitFailure, []string{"--memory 256 KiB is too small"}},

		// Choosing k and comparing.
		{"k range reversed", fit("--k", "5:2"), exitUsage, []string{"--k", `"5:2"`}},
		{"k range from zero", fit("--k", "0:3"), exitUsage, []string{"--k", "k must be at least 1"}},
		{"k empty", fit("--k", ""), exitUsage, []string{"--k is required"}},
		{"k range above rows", fit("--k", "2:50"), exitFailure, []string{"the largest candidate, 50, is more than the 40 usable rows"}},
		{"unknown criterion", fit("--k", "2:4", "--criterion", "gap"), exitUsage, []string{"--criterion", `"gap"`}},
		{"criterion of the other method", fit("--k", "2:4", "--criterion", "icl"), exitUsage, []string{"--criterion icl applies to --method gmm only"}},
		{"labels of three columns", []string{"compare", "sc", "--labels", "SELECT id, a, b FROM " + w.table("lab")}, exitFailure, []string{"exactly two columns"}},
		{"labels matching no key", []string{"compare", "sc", "--labels", "SELECT id, a FROM " + w.table("lab") + " WHERE id = 5000"},
			exitFailure, []string{"no key matches: 40 rows of sc@1 and 1 labelled rows"}},
		{"labels repeating a key", []string{"compare", "sc", "--labels", "SELECT id, a FROM " + w.table("lab")}, exitFailure, []string{"key 5001 more than once"}},
		{"labels and against", []string{"compare", "sc", "--labels", "SELECT 1, 2", "--against", "sc@1"}, exitUsage, []string{"exactly one of --labels and --against"}},
		{"against another model", []string{"compare", "sc", "--against", "other@1"}, exitUsage, []string{"another version of the same model"}},
		{"against a missing version", []string{"compare", "sc", "--against", "sc@9"}, exitFailure, []string{"sc@9"}},
		{"fit with bad labels", []string{"fit", "m", "--query", pts, "--key", "id", "--k", "2", "--labels", "SELECT id FROM " + w.table("lab")},
			exitFailure, []string{"exactly two columns"}},

		// Scheduled operation.
		{"score missing a feature", []string{"score", "sc", "--query", "SELECT id, x FROM " + w.table("pts")}, exitFailure, []string{`"y"`}},
		{"score with an extra column", []string{"score", "sc", "--query", "SELECT id, x, y, 1 AS z FROM " + w.table("pts")},
			exitFailure, []string{`column "z" is neither the key nor a feature of sc@1`}},
		{"score a missing version", []string{"score", "sc@9", "--query", pts}, exitFailure, []string{"sc@9"}},
		{"score a pruned version", []string{"score", "sc@2", "--query", pts}, exitFailure, []string{"sc@2 is pruned"}},
		{"score a feature that cannot be cast", []string{"score", "sc", "--query", "SELECT id, x, y FROM " + w.table("words")}, exitFailure, []string{`"x"`}},
		{"score a key of another type", []string{"score", "sc", "--query", "SELECT id::text AS id, x, y FROM " + w.table("pts")},
			exitFailure, []string{`key column "id" is text here but bigint`}},
		{"score in an unknown mode", []string{"score", "sc", "--query", pts, "--mode", "merge"}, exitUsage, []string{"--mode must be upsert or replace"}},
		{"score a repeated key, upsert", []string{"score", "sc", "--query", pts + " UNION ALL SELECT id, x, y FROM " + w.table("pts") + " WHERE id = 7"},
			exitFailure, []string{`key column "id" is not unique`, "(id)=(7)"}},
		{"score a repeated key, replace", []string{"score", "sc", "--query", pts + " UNION ALL SELECT id, x, y FROM " + w.table("pts") + " WHERE id = 7", "--mode", "replace"},
			exitFailure, []string{`key column "id" is not unique`, "(id)=(7)"}},
		{"score a NaN, replace", []string{"score", "sc", "--query", pts + " UNION ALL SELECT 9999, 'NaN', 1", "--mode", "replace"},
			exitFailure, []string{`"x"`, "NaN"}},
		{"score an unknown model", []string{"score", "nosuch", "--query", pts}, exitFailure, []string{"nosuch"}},
		{"score the published version unpublished", []string{"score", "sc@1", "--query", pts, "--no-publish"}, exitFailure, []string{"sc@1 is the published version", "--no-publish"}},
		{"publish a failed version", []string{"publish", "sc@4"}, exitFailure, []string{"the version is failed"}},
		{"publish a running version", []string{"publish", "sc@5"}, exitFailure, []string{"the version is running"}},
		{"publish a pruned version", []string{"publish", "sc@2"}, exitFailure, []string{"the version is pruned"}},
		{"publish without a version", []string{"publish", "sc"}, exitUsage, []string{"needs a version"}},
		{"prune keeping none", []string{"prune", "sc", "--keep", "0"}, exitUsage, []string{"--keep must be at least 1"}},
		{"drop the published version", []string{"drop", "sc@1"}, exitFailure, []string{"published version"}},
	}
	before := snapshot(t, w)
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			// The workspace's flags go before the case's, so that a case's
			// own --schema wins.
			args := append(append([]string{c.args[0]}, w.args()...), c.args[1:]...)
			code, _, stderr := assort(t, args...)
			if code != c.code {
				t.Errorf("exit %d, want %d; stderr:\n%s", code, c.code, stderr)
			}
			for _, m := range c.msg {
				if !strings.Contains(stderr, m) {
					t.Errorf("stderr lacks %q:\n%s", m, stderr)
				}
			}
			if after := snapshot(t, w); after != before {
				t.Errorf("something was written:\nbefore %s\nafter  %s", before, after)
			}
		})
	}
}

// snapshot describes everything a command could write in the workspace:
// its relations, its functions, the rows of every registry table and of
// every version's tables.
func snapshot(t *testing.T, w *workspace) string {
	t.Helper()
	var rels, funcs, rows string
	w.scalar(t, `SELECT coalesce(string_agg(relname || ':' || relkind::text, ',' ORDER BY relname), '')
		FROM pg_class WHERE relnamespace = $1::regnamespace AND relkind IN ('r', 'v', 'm', 'p')`, &rels, w.schema)
	w.scalar(t, `SELECT coalesce(string_agg(proname, ',' ORDER BY proname), '') FROM pg_proc WHERE pronamespace = $1::regnamespace`, &funcs, w.schema)
	var counts []string
	for _, table := range []string{"models", "components", "publications", "candidates", "comparisons", "comparison_cells", "scorings", "retired_versions"} {
		var n, sum string
		w.scalar(t, "SELECT count(*)::text FROM "+w.table(table), &n)
		w.scalar(t, "SELECT coalesce(md5(string_agg(x::text, ',' ORDER BY x::text)), '') FROM "+w.table(table)+" x", &sum)
		counts = append(counts, table+"="+n+"/"+sum)
	}
	// The rows of every version's tables: a failed score must leave them
	// as they were, whatever its mode.
	var versions []string
	rs, err := w.conn.Query(t.Context(), `SELECT relname FROM pg_class WHERE relnamespace = $1::regnamespace AND relkind = 'r'
		AND relname ~ '_v[0-9]+(_memberships)?$' ORDER BY relname`, w.schema)
	if err != nil {
		t.Fatal(err)
	}
	for rs.Next() {
		var name string
		if err := rs.Scan(&name); err != nil {
			t.Fatal(err)
		}
		versions = append(versions, name)
	}
	if err := rs.Err(); err != nil {
		t.Fatal(err)
	}
	for _, table := range versions {
		var sum string
		w.scalar(t, "SELECT count(*) || ':' || coalesce(md5(string_agg(x::text, ',' ORDER BY x::text)), '') FROM "+w.table(table)+" x", &sum)
		counts = append(counts, table+"="+sum)
	}
	rows = strings.Join(counts, " ")
	return rels + "\n" + funcs + "\n" + rows
}
