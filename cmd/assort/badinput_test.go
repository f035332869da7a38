package main

import (
	"fmt"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"assort/dbio/dbtest"
	"assort/schema"
)

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

// TestSpreadWarning warns when unscaled features' standard deviations
// differ by more than 100 times, naming both features, and not when
// --scale standard is given.
func TestSpreadWarning(t *testing.T) {
	w := newWorkspace(t)
	w.exec(t, "CREATE TABLE "+w.table("mag")+" AS SELECT g AS id, (g % 10)::float8 AS small, (g % 7) * 1000.0 AS large FROM generate_series(1, 200) g")
	q := "SELECT id, small, large FROM " + w.table("mag")
	code, _, stderr := assort(t, "fit", "warned", "--query", q, "--key", "id", "--k", "2", "-d", w.url, "--schema", w.schema)
	if code != exitOK || !strings.Contains(stderr, `feature spreads differ by more than 100x (standard deviation of "large"`) || !strings.Contains(stderr, `of "small"`) {
		t.Errorf("exit %d; stderr lacks the spread warning:\n%s", code, stderr)
	}
	code, _, stderr = assort(t, "fit", "scaled", "--query", q, "--key", "id", "--k", "2", "--scale", "standard", "-d", w.url, "--schema", w.schema)
	if code != exitOK || strings.Contains(stderr, "spreads differ") {
		t.Errorf("--scale standard: exit %d, stderr:\n%s", code, stderr)
	}
	var spread []float64
	w.scalar(t, "SELECT spread FROM "+w.table("models")+" WHERE name = 'scaled'", &spread)
	if len(spread) != 2 || spread[1] < 100*spread[0] {
		t.Errorf("stored spread %v, want the two features' standard deviations", spread)
	}
}
