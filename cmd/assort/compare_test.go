package main

import (
	"bufio"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"assort/schema"
)

// reference reads "name value" lines of a file in testdata, skipping
// comments.
func reference(t *testing.T, file string) map[string]float64 {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "..", "testdata", file))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	ref := map[string]float64{}
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fields := strings.Fields(sc.Text())
		if len(fields) != 2 || strings.HasPrefix(fields[0], "#") {
			continue
		}
		if v, err := strconv.ParseFloat(fields[1], 64); err == nil {
			ref[fields[0]] = v
		}
	}
	return ref
}

// TestIrisCompareWithSpecies fits k-means (k=3) to Fisher's Iris data and
// compares the clusters with the species (text labels). Reference values:
// testdata/iris_kmeans_agreement.txt, computed with scikit-learn 1.2.1 (the
// script is in testdata/reference/): matched accuracy 0.8933, ARI 0.7302.
func TestIrisCompareWithSpecies(t *testing.T) {
	w := newWorkspace(t)
	loadIris(t, w)
	ref := reference(t, "iris_kmeans_agreement.txt")
	labels := "SELECT id, species FROM " + w.table("species")
	out := mustAssort(t, w.args("fit", "iris_k3", "--query", "SELECT id, sepal_length, sepal_width, petal_length, petal_width FROM "+w.table("iris"),
		"--key", "id", "--k", "3", "--restarts", "20", "--labels", labels, "--json")...)
	var sum summary
	if err := json.Unmarshal([]byte(out), &sum); err != nil {
		t.Fatalf("%v in %s", err, out)
	}
	c := sum.Comparison
	if c == nil {
		t.Fatalf("fit --labels gave no comparison:\n%s", out)
	}
	for _, x := range []struct {
		name      string
		got, want float64
	}{
		{"matched accuracy", c.Accuracy, ref["matched_accuracy"]},
		{"adjusted Rand index", c.ARI, ref["ari"]},
		{"normalised mutual information", c.NMI, ref["nmi"]},
	} {
		if math.Abs(x.got-x.want) > 1e-9 {
			t.Errorf("%s %.10f, want %.10f", x.name, x.got, x.want)
		}
	}
	if c.RowsCommon != 150 || c.RowsModelOnly != 0 || c.RowsOtherOnly != 0 {
		t.Errorf("rows %d common, %d model only, %d labels only; want 150, 0, 0", c.RowsCommon, c.RowsModelOnly, c.RowsOtherOnly)
	}
	// setosa is recovered exactly: one matched cell of 50 rows.
	found := false
	for _, cell := range c.Cells {
		if cell.Label == "setosa" && cell.Rows == 50 && cell.Matched {
			found = true
		}
	}
	if !found {
		t.Errorf("no matched cell of 50 setosa rows: %+v", c.Cells)
	}

	// compare on its own, with rows on one side only: drop 10 labels, add 3
	// unknown keys; they are counted, not dropped silently.
	w.exec(t, "DELETE FROM "+w.table("species")+" WHERE id <= 10")
	w.exec(t, "INSERT INTO "+w.table("species")+" VALUES (1001, 'setosa'), (1002, 'virginica'), (1003, 'versicolor')")
	text := mustAssort(t, w.args("compare", "iris_k3", "--labels", labels)...)
	for _, want := range []string{"140 in both, 10 only in iris_k3@1, 3 only on the other side", "[40]", "setosa"} {
		if !strings.Contains(text, want) {
			t.Errorf("compare output lacks %q:\n%s", want, text)
		}
	}
	var stored int
	w.scalar(t, "SELECT count(*) FROM "+w.table("comparisons")+" WHERE name = 'iris_k3' AND labels_query = $1", &stored, labels)
	if stored != 2 {
		t.Errorf("%d comparisons stored, want 2", stored)
	}
}

// TestCompareVersions compares two versions: a refit on the same rows
// with another seed finds the same well-separated groups, so every
// agreement figure is 1 whatever the numbering.
func TestCompareVersions(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{40, 30, 20}, 9)
	q := "SELECT id, x, y FROM " + w.table("pts")
	mustAssort(t, w.args("fit", "cmp", "--query", q, "--key", "id", "--k", "3", "--seed", "1")...)
	mustAssort(t, w.args("fit", "cmp", "--query", q+" WHERE id > 5", "--key", "id", "--k", "3", "--seed", "2")...)
	out := mustAssort(t, w.args("compare", "cmp@1", "--against", "cmp@2", "--json")...)
	var c schema.Comparison
	if err := json.Unmarshal([]byte(out), &c); err != nil {
		t.Fatal(err)
	}
	if c.Accuracy != 1 || math.Abs(c.ARI-1) > 1e-12 || math.Abs(c.NMI-1) > 1e-12 || c.RowsCommon != 85 || c.RowsModelOnly != 5 || c.RowsOtherOnly != 0 {
		t.Fatalf("comparison %+v", c)
	}
}

// TestChooseK fits a range of k to three well-separated groups: BIC picks
// 3 for k-means and for a mixture, and every candidate is recorded.
func TestChooseK(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{150, 120, 90}, 4)
	q := "SELECT id, x, y FROM " + w.table("pts")
	for _, method := range []string{"kmeans", "gmm"} {
		name := "choose_" + method
		mustAssort(t, w.args("fit", name, "--query", q, "--key", "id", "--k", "1:6", "--method", method)...)
		var k, n int
		var chosen string
		w.scalar(t, "SELECT k FROM "+w.table("models")+" WHERE name = $1", &k, name)
		w.scalar(t, "SELECT count(*) FROM "+w.table("candidates")+" WHERE name = $1", &n, name)
		w.scalar(t, "SELECT string_agg(k::text, ',') FROM "+w.table("candidates")+" WHERE name = $1 AND chosen", &chosen, name)
		if k != 3 || n != 6 || chosen != "3" {
			t.Errorf("%s: model k=%d, %d candidates, chosen %q; want 3, 6, \"3\"", method, k, n, chosen)
		}
		show := mustAssort(t, w.args("show", name)...)
		if !strings.Contains(show, "candidates (chosen by bic") || !strings.Contains(show, "*  3") {
			t.Errorf("%s: show lacks the candidates table with k=3 marked:\n%s", method, show)
		}
	}
}
