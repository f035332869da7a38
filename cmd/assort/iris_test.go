package main

import (
	"context"
	"encoding/csv"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/jackc/pgx/v5"
)

// irisOptimum is the lowest k-means inertia of the raw Iris data with k=3,
// as recorded in testdata/iris_kmeans_reference.txt.
const irisOptimum = 78.85144142614601

// loadIris creates table iris(id, sepal_length, sepal_width, petal_length,
// petal_width) and species(id, species) from testdata.
func loadIris(t *testing.T, w *workspace) {
	t.Helper()
	w.exec(t, "CREATE TABLE "+w.table("iris")+" (id int PRIMARY KEY, sepal_length float8, sepal_width float8, petal_length float8, petal_width float8)")
	w.exec(t, "CREATE TABLE "+w.table("species")+" (id int PRIMARY KEY, species text)")
	copyCSV(t, w, "iris.csv", "iris", []string{"id", "sepal_length", "sepal_width", "petal_length", "petal_width"}, []bool{true, false, false, false, false})
	copyCSV(t, w, "iris_labels.csv", "species", []string{"id", "species"}, []bool{true, false})
}

// copyCSV loads the first len(cols) columns of testdata/file; ints marks the
// integer ones, the rest are floats when numeric and text otherwise.
func copyCSV(t *testing.T, w *workspace, file, table string, cols []string, ints []bool) {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "..", "testdata", file))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	var rows [][]any
	for _, rec := range recs[1:] {
		row := make([]any, len(cols))
		for j := range cols {
			switch {
			case ints[j]:
				v, err := strconv.Atoi(rec[j])
				if err != nil {
					t.Fatal(err)
				}
				row[j] = int32(v)
			default:
				if v, err := strconv.ParseFloat(rec[j], 64); err == nil {
					row[j] = v
				} else {
					row[j] = rec[j]
				}
			}
		}
		rows = append(rows, row)
	}
	if _, err := w.conn.CopyFrom(context.Background(), pgx.Identifier{w.schema, table}, cols, pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
}
