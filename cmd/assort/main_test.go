package main

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"assort/dbio/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// assort runs the command in-process and returns its exit status and
// output.
func assort(t *testing.T, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	code = run(context.Background(), args, &out, &errb)
	return code, out.String(), errb.String()
}

// mustAssort runs the command and fails the test unless it succeeds.
func mustAssort(t *testing.T, args ...string) string {
	t.Helper()
	code, out, errs := assort(t, args...)
	if code != 0 {
		t.Fatalf("assort %s: exit %d\nstdout:\n%s\nstderr:\n%s", strings.Join(args, " "), code, out, errs)
	}
	return out
}

// workspace is a fresh schema holding both a test's catalogue tables and
// its registry, with a connection to it.
type workspace struct {
	url, schema string
	conn        *pgx.Conn
}

func newWorkspace(t *testing.T) *workspace {
	t.Helper()
	url, s := dbtest.Schema(t)
	conn := dbtest.Conn(t)
	w := &workspace{url: url, schema: s, conn: conn}
	mustAssort(t, "migrate", "-q", "-d", url, "--schema", s)
	return w
}

// args prepends the connection and schema flags.
func (w *workspace) args(args ...string) []string {
	return append(args, "-d", w.url, "--schema", w.schema, "-q")
}

func (w *workspace) table(name string) string { return pgx.Identifier{w.schema, name}.Sanitize() }

func (w *workspace) exec(t *testing.T, sql string, args ...any) {
	t.Helper()
	if _, err := w.conn.Exec(context.Background(), sql, args...); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
}

func (w *workspace) scalar(t *testing.T, sql string, dst any, args ...any) {
	t.Helper()
	if err := w.conn.QueryRow(context.Background(), sql, args...).Scan(dst); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
}

// blobs creates table name(id bigint, x, y float8) with three well
// separated groups of the given sizes, deterministic for a seed.
func (w *workspace) blobs(t *testing.T, name string, sizes []int, seed uint64) {
	t.Helper()
	w.exec(t, "CREATE TABLE "+w.table(name)+" (id bigint PRIMARY KEY, x float8, y float8)")
	rng := rand.New(rand.NewPCG(seed, 1))
	centres := [][2]float64{{0, 0}, {10, 0}, {0, 10}, {10, 10}}
	var rows [][]any
	id := int64(1)
	for g, n := range sizes {
		for range n {
			rows = append(rows, []any{id, centres[g][0] + rng.NormFloat64(), centres[g][1] + rng.NormFloat64()})
			id++
		}
	}
	if _, err := w.conn.CopyFrom(context.Background(), pgx.Identifier{w.schema, name}, []string{"id", "x", "y"}, pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
}

func TestFitJoinsBackAndVersions(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{300, 200, 100}, 5)
	query := "SELECT id, x, y FROM " + w.table("pts")
	mustAssort(t, w.args("fit", "blobs", "--query", query, "--key", "id", "--k", "3", "--seed", "7")...)

	// Every row has exactly one cluster, and the view joins back to the source.
	var joined, distinct int
	if err := w.conn.QueryRow(context.Background(), "SELECT count(*), count(DISTINCT p.id) FROM "+w.table("pts")+" p JOIN "+w.table("blobs")+" c USING (id)").Scan(&joined, &distinct); err != nil {
		t.Fatal(err)
	}
	if joined != 600 || distinct != 600 {
		t.Fatalf("join gave %d rows for %d keys, want 600 and 600", joined, distinct)
	}
	// Sizes in the registry equal the counts in the result table, and the
	// clusters are numbered by descending size: the blobs are far apart,
	// so the sizes are exactly the generated ones.
	rows, err := w.conn.Query(context.Background(), `SELECT c.cluster, c.size, (SELECT count(*) FROM `+w.table("blobs_v1")+` r WHERE r.cluster = c.cluster)
		FROM `+w.table("components")+` c WHERE name = 'blobs' AND version = 1 ORDER BY cluster`)
	if err != nil {
		t.Fatal(err)
	}
	got, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) ([3]int64, error) {
		var v [3]int64
		err := r.Scan(&v[0], &v[1], &v[2])
		return v, err
	})
	if err != nil {
		t.Fatal(err)
	}
	want := [][3]int64{{1, 300, 300}, {2, 200, 200}, {3, 100, 100}}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("cluster, registry size, table count = %v, want %v", got, want)
	}
	// The key keeps its type.
	var keyType string
	w.scalar(t, `SELECT format_type(atttypid, atttypmod) FROM pg_attribute WHERE attrelid = $1::regclass AND attname = 'id'`, &keyType, w.schema+".blobs_v1")
	if keyType != "bigint" {
		t.Fatalf("key type %q, want bigint", keyType)
	}

	// A rerun makes version 2 and the view moves to it.
	mustAssort(t, w.args("fit", "blobs", "--query", query+" WHERE id <= 550", "--key", "id", "--k", "3", "--seed", "8")...)
	var n int
	w.scalar(t, "SELECT count(*) FROM "+w.table("blobs"), &n)
	if n != 550 {
		t.Fatalf("view has %d rows after the refit on 550, want 550", n)
	}
	var statuses string
	w.scalar(t, "SELECT string_agg(version || ':' || status, ',' ORDER BY version) FROM "+w.table("models"), &statuses)
	if statuses != "1:ready,2:ready" {
		t.Fatalf("registry versions %q, want 1:ready,2:ready", statuses)
	}
	out := mustAssort(t, w.args("models")...)
	if !strings.Contains(out, "blobs  2") && !strings.Contains(out, "blobs") {
		t.Fatalf("models listing lacks blobs:\n%s", out)
	}
	show := mustAssort(t, w.args("show", "blobs@1")...)
	if !strings.Contains(show, "blobs@1 (ready)") {
		t.Fatalf("show blobs@1:\n%s", show)
	}
}

// TestIrisThroughPostgres fits Fisher's Iris data (Fisher 1936; the copy in
// testdata/iris.csv, source in testdata/SOURCES.md) from a table: k=3 on the
// raw four measurements reaches the known optimum inertia 78.8514 with
// cluster sizes 50, 62, 38 (value recorded in
// testdata/iris_kmeans_reference.txt from a reference library).
func TestIrisThroughPostgres(t *testing.T) {
	w := newWorkspace(t)
	loadIris(t, w)
	mustAssort(t, w.args("fit", "iris_k3", "--query", "SELECT id, sepal_length, sepal_width, petal_length, petal_width FROM "+w.table("iris"),
		"--key", "id", "--k", "3", "--seed", "1", "--restarts", "20")...)
	var inertia float64
	var sizes string
	w.scalar(t, "SELECT inertia FROM "+w.table("models")+" WHERE name = 'iris_k3'", &inertia)
	w.scalar(t, "SELECT string_agg(size::text, ',' ORDER BY cluster) FROM "+w.table("components")+" WHERE name = 'iris_k3'", &sizes)
	if math.Abs(inertia-irisOptimum) > 1e-4 {
		t.Errorf("inertia %.6f, want %.6f within 1e-4", inertia, irisOptimum)
	}
	if sizes != "62,50,38" {
		t.Errorf("cluster sizes %s, want 62,50,38 (by descending size)", sizes)
	}
}
