package main

import (
	"math"
	"strings"
	"testing"
)

// TestMixtureMemberships fits a Gaussian mixture through PostgreSQL and
// checks the memberships table: it joins to the result table and the
// source, each row's stored probabilities sum to at most 1, and to 1
// within 1e-9 when the floor is 0; the hard label is the most probable
// component and its probability is the result table's.
func TestMixtureMemberships(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{300, 200, 100}, 8)
	q := "SELECT id, x, y FROM " + w.table("pts")
	for _, c := range []struct {
		name, floor string
		exact       bool
	}{
		{"mix_floor0", "0", true},
		{"mix_default", "0.001", false},
	} {
		mustAssort(t, w.args("fit", c.name, "--query", q, "--key", "id", "--method", "gmm", "--k", "3", "--covariance", "full", "--membership-floor", c.floor)...)
		var rows, joined, over, notOne, wrongLabel int
		w.scalar(t, "SELECT count(*) FROM "+w.table(c.name), &rows)
		w.scalar(t, "SELECT count(DISTINCT p.id) FROM "+w.table(c.name+"_memberships")+" m JOIN "+w.table(c.name)+" r USING (id) JOIN "+w.table("pts")+" p USING (id)", &joined)
		w.scalar(t, "SELECT count(*) FROM (SELECT id, sum(probability) s FROM "+w.table(c.name+"_memberships")+" GROUP BY id) x WHERE s > 1 + 1e-12", &over)
		w.scalar(t, "SELECT count(*) FROM (SELECT id, sum(probability) s FROM "+w.table(c.name+"_memberships")+" GROUP BY id) x WHERE abs(s - 1) > 1e-9", &notOne)
		w.scalar(t, `SELECT count(*) FROM `+w.table(c.name)+` r WHERE NOT EXISTS (SELECT 1 FROM `+w.table(c.name+"_memberships")+` m
			WHERE m.id = r.id AND m.cluster = r.cluster AND m.probability = r.probability
			AND m.probability = (SELECT max(probability) FROM `+w.table(c.name+"_memberships")+` m2 WHERE m2.id = r.id))`, &wrongLabel)
		if rows != 600 || joined != 600 || over != 0 || wrongLabel != 0 {
			t.Errorf("%s: %d result rows, %d joined, %d with sums over 1, %d hard labels not the top membership", c.name, rows, joined, over, wrongLabel)
		}
		if c.exact && notOne != 0 {
			t.Errorf("%s: %d rows whose memberships do not sum to 1 with floor 0", c.name, notOne)
		}
		var logL, bic, aic float64
		var params int
		w.scalar(t, "SELECT log_likelihood FROM "+w.table("models")+" WHERE name = $1", &logL, c.name)
		w.scalar(t, "SELECT bic FROM "+w.table("models")+" WHERE name = $1", &bic, c.name)
		w.scalar(t, "SELECT aic FROM "+w.table("models")+" WHERE name = $1", &aic, c.name)
		w.scalar(t, "SELECT params FROM "+w.table("models")+" WHERE name = $1", &params, c.name)
		// Full covariance, k=3, d=2: p = (k−1) + k·d + k·d(d+1)/2 = 2 + 6 + 9 (common practice).
		if params != 17 || math.Abs(bic-(-2*logL+17*math.Log(600))) > 1e-6 || math.Abs(aic-(-2*logL+34)) > 1e-6 {
			t.Errorf("%s: p=%d, BIC %v, AIC %v for log L %v", c.name, params, bic, aic, logL)
		}
		// The view on the memberships follows the published version.
		var viewRows, tableRows int
		w.scalar(t, "SELECT count(*) FROM "+w.table(c.name+"_memberships"), &viewRows)
		w.scalar(t, "SELECT count(*) FROM "+w.table(c.name+"_v1_memberships"), &tableRows)
		if viewRows != tableRows || viewRows < 600 {
			t.Errorf("%s: memberships view has %d rows, table %d", c.name, viewRows, tableRows)
		}
	}
	show := mustAssort(t, w.args("show", "mix_floor0")...)
	for _, want := range []string{"EM, full covariance", "sd", "correlations in cluster 1"} {
		if !strings.Contains(show, want) {
			t.Errorf("show lacks %q:\n%s", want, show)
		}
	}
	// A k-means model has no memberships table.
	mustAssort(t, w.args("fit", "plain", "--query", q, "--key", "id", "--k", "3")...)
	var n int
	w.scalar(t, "SELECT count(*) FROM pg_class WHERE relnamespace = $1::regnamespace AND relname LIKE 'plain%memberships'", &n, w.schema)
	if n != 0 {
		t.Errorf("k-means model has %d memberships relations", n)
	}
}

// TestFaithfulBIC chooses k among 1..6 by BIC for full-covariance mixtures
// of the Old Faithful eruptions (Azzalini & Bowman 1990; testdata/faithful.csv,
// source in testdata/SOURCES.md). The reference choice and BIC values were
// computed with scikit-learn 1.2.1 (testdata/faithful_bic.txt; script in
// testdata/reference/faithful_bic.py).
func TestFaithfulBIC(t *testing.T) {
	w := newWorkspace(t)
	w.exec(t, "CREATE TABLE "+w.table("faithful")+" (id int PRIMARY KEY, eruptions float8, waiting float8)")
	copyCSV(t, w, "faithful.csv", "faithful", []string{"id", "eruptions", "waiting"}, []bool{true, false, false})
	ref := reference(t, "faithful_bic.txt")
	mustAssort(t, w.args("fit", "geyser", "--query", "SELECT id, eruptions, waiting FROM "+w.table("faithful"),
		"--key", "id", "--method", "gmm", "--covariance", "full", "--k", "1:6", "--restarts", "10")...)
	var k int
	w.scalar(t, "SELECT k FROM "+w.table("models")+" WHERE name = 'geyser'", &k)
	if k != int(ref["chosen_k"]) {
		t.Errorf("BIC chose k=%d, the reference library k=%v", k, ref["chosen_k"])
	}
	// The chosen candidate's BIC agrees with the reference to 1e-3 (the
	// covariance floors differ: 1e-6 × mean variance here, 1e-6 there).
	var bic float64
	w.scalar(t, "SELECT bic FROM "+w.table("candidates")+" WHERE name = 'geyser' AND chosen", &bic)
	if math.Abs(bic-ref["bic_k2"]) > 1e-3 {
		t.Errorf("BIC of k=2 is %.6f, the reference library's %.6f", bic, ref["bic_k2"])
	}
}
