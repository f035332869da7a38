package main

import (
	"fmt"
	"strings"
	"testing"
)

// TestNightlyCycle follows a scheduled model through a night: fit v1,
// score the rows that arrived, refit v2 on the grown table, roll back to
// v1. The catalogue has three known populations; the refit makes the third
// the largest, so numbering by size alone would move it to 1, and stable
// numbering must keep every population's number.
func TestNightlyCycle(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "cat", []int{100, 80, 60}, 11) // A: ids 1-100 at (0,0); B: 101-180 at (10,0); C: 181-240 at (0,10)
	q := "SELECT id, x, y FROM " + w.table("cat")
	mustAssort(t, w.args("fit", "night", "--query", q, "--key", "id", "--k", "3", "--seed", "5")...)
	want := map[int]int{1: 1, 150: 2, 200: 3} // a row of A, B, C and its number in v1 (by size)
	clusterOf := func(table string, id int) int {
		var c int
		w.scalar(t, "SELECT cluster FROM "+w.table(table)+" WHERE id = $1", &c, id)
		return c
	}
	for id, c := range want {
		if got := clusterOf("night", id); got != c {
			t.Fatalf("v1: row %d in cluster %d, want %d", id, got, c)
		}
	}

	// 150 new rows of population C arrive and are scored with v1.
	w.exec(t, "INSERT INTO "+w.table("cat")+" SELECT 1000 + g, 0.5 * sin(g), 10 + 0.5 * cos(g) FROM generate_series(1, 150) g")
	mustAssort(t, w.args("score", "night", "--query", q+" WHERE id > 1000")...)
	var scored, inC int
	w.scalar(t, "SELECT count(*) FROM "+w.table("night")+" WHERE id > 1000", &scored)
	w.scalar(t, "SELECT count(*) FROM "+w.table("night")+" WHERE id > 1000 AND cluster = 3", &inC)
	if scored != 150 || inC != 150 {
		t.Fatalf("scored %d new rows, %d of them in cluster 3; want 150 and 150", scored, inC)
	}

	// The refit keeps the numbers although C is now the largest.
	mustAssort(t, w.args("fit", "night", "--query", q, "--key", "id", "--k", "3", "--seed", "6")...)
	for id, c := range want {
		if got := clusterOf("night", id); got != c {
			t.Errorf("v2: row %d in cluster %d, want %d (stable numbering)", id, got, c)
		}
	}
	var against int
	var basis string
	w.scalar(t, "SELECT renumbered_against FROM "+w.table("models")+" WHERE name = 'night' AND version = 2", &against)
	w.scalar(t, "SELECT renumber_basis FROM "+w.table("models")+" WHERE name = 'night' AND version = 2", &basis)
	var matched string
	w.scalar(t, "SELECT string_agg(cluster || '<-' || fitted_order || '=' || matched_cluster, ',' ORDER BY cluster) FROM "+w.table("components")+" WHERE name = 'night' AND version = 2", &matched)
	if against != 1 || basis != "centres" || matched != "1<-2=1,2<-3=2,3<-1=3" {
		t.Errorf("v2 matched against v%d by %q: %s; want v1, centres, 1<-2=1,2<-3=2,3<-1=3", against, basis, matched)
	}
	// Without renumbering, clusters are numbered by size: C first.
	mustAssort(t, w.args("fit", "night", "--query", q, "--key", "id", "--k", "3", "--seed", "6", "--no-renumber", "--no-publish")...)
	if got := clusterOf("night_v3", 200); got != 1 {
		t.Errorf("v3 (--no-renumber): row 200 in cluster %d, want 1", got)
	}

	// A fourth population appears; k=4 gives it the next free number.
	w.exec(t, "INSERT INTO "+w.table("cat")+" SELECT 2000 + g, 10 + 0.5 * sin(g), 10 + 0.5 * cos(g) FROM generate_series(1, 70) g")
	mustAssort(t, w.args("fit", "night", "--query", q, "--key", "id", "--k", "4", "--seed", "6")...)
	for id, c := range map[int]int{1: 1, 150: 2, 200: 3, 2001: 4} {
		if got := clusterOf("night", id); got != c {
			t.Errorf("v4: row %d in cluster %d, want %d", id, got, c)
		}
	}

	// Roll back to v1: the view follows, with the rows scored into it.
	mustAssort(t, w.args("publish", "night@1")...)
	var n int
	w.scalar(t, "SELECT count(*) FROM "+w.table("night"), &n)
	if n != 390 {
		t.Errorf("after publishing v1 again the view has %d rows, want 390", n)
	}
	mustAssort(t, w.args("prune", "night", "--keep", "1")...)
	var statuses string
	w.scalar(t, "SELECT string_agg(version || ':' || status, ',' ORDER BY version) FROM "+w.table("models"), &statuses)
	if statuses != "1:ready,2:pruned,3:pruned,4:ready" {
		t.Errorf("after prune --keep 1: %s", statuses)
	}
}

// TestScoreEqualsFit scores a fit's own query with the stored model: every
// row gets exactly the fit's cluster, probability, distance and log density.
func TestScoreEqualsFit(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{200, 150, 100}, 21)
	q := "SELECT id, x, y FROM " + w.table("pts")
	for _, c := range []struct{ name, method, scale string }{
		{"eq_kmeans", "kmeans", "standard"},
		{"eq_gmm_full", "gmm", "robust"},
	} {
		args := []string{"fit", c.name, "--query", q, "--key", "id", "--k", "3", "--method", c.method, "--scale", c.scale}
		if c.method == "gmm" {
			args = append(args, "--membership-floor", "0")
		}
		mustAssort(t, w.args(args...)...)
		w.exec(t, "CREATE TABLE "+w.table(c.name+"_snap")+" AS SELECT * FROM "+w.table(c.name))
		mustAssort(t, w.args("score", c.name, "--query", q, "--mode", "replace")...)
		var same, total int
		w.scalar(t, fmt.Sprintf(`SELECT count(*) FILTER (WHERE s.cluster = r.cluster AND s.probability = r.probability
			AND s.distance = r.distance AND s.log_density IS NOT DISTINCT FROM r.log_density)
			FROM %s s JOIN %s r USING (id)`, w.table(c.name+"_snap"), w.table(c.name)), &same)
		w.scalar(t, "SELECT count(*) FROM "+w.table(c.name), &total)
		if same != 450 || total != 450 {
			t.Errorf("%s: %d of %d rows identical after scoring the fit's own query, want 450 of 450", c.name, same, total)
		}
	}
}

// TestScoreReplaceReadingItself replaces a version's rows with a query
// that reads the version's own view (keep only the rows with an even key):
// the read's lock on the table would block the truncation of an in-place
// replacement, so it goes through staging and must finish, with exactly
// the query's rows, for k-means and for a mixture (whose memberships
// table is replaced too).
func TestScoreReplaceReadingItself(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{60, 40}, 8)
	q := "SELECT id, x, y FROM " + w.table("pts")
	for _, method := range []string{"kmeans", "gmm"} {
		name := "self_" + method
		mustAssort(t, w.args("fit", name, "--query", q, "--key", "id", "--k", "2", "--method", method, "--lock-timeout", "5s")...)
		self := "SELECT p.id, p.x, p.y FROM " + w.table("pts") + " p JOIN " + w.table(name) + " r USING (id) WHERE p.id % 2 = 0"
		code, out, stderr := assort(t, append(w.args("score", name, "--query", self, "--mode", "replace", "--lock-timeout", "5s"), "-q=false")...)
		if code != exitOK || !strings.Contains(stderr, "through staging tables") {
			t.Fatalf("%s: exit %d, want 0 and a note on staging; output:\n%s%s", method, code, out, stderr)
		}
		var rows, odd int
		w.scalar(t, "SELECT count(*) FROM "+w.table(name), &rows)
		w.scalar(t, "SELECT count(*) FROM "+w.table(name)+" WHERE id % 2 = 1", &odd)
		if rows != 50 || odd != 0 {
			t.Errorf("%s: %d rows (%d with odd keys) after the replacement, want 50 (0)", method, rows, odd)
		}
		if method == "gmm" {
			w.scalar(t, "SELECT count(DISTINCT id) FROM "+w.table(name+"_memberships"), &rows)
			w.scalar(t, "SELECT count(*) FROM "+w.table(name+"_memberships")+" WHERE id % 2 = 1", &odd)
			if rows != 50 || odd != 0 {
				t.Errorf("memberships: %d keys (%d odd) after the replacement, want 50 (0)", rows, odd)
			}
		}
	}
}
