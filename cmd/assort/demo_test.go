package main

import (
	"strings"
	"testing"

	"assort/dbio/dbtest"
)

// TestDemo runs the demo against the test database. The demo invents four
// populations and knows which row came from which, so the check is
// external to the fit: BIC must choose k=4 and the clusters must recover
// the populations (they overlap a little, so not perfectly).
func TestDemo(t *testing.T) {
	url, reg := dbtest.Schema(t)
	_, cat := dbtest.Schema(t)
	out := mustAssort(t, "demo", "-q", "-d", url, "--schema", reg, "--catalogue-schema", cat)
	for _, want := range []string{"colours@1: EM, full covariance, k=4", "*  4", "91666 in both", "confusion matrix"} {
		if !strings.Contains(out, want) {
			t.Errorf("demo output lacks %q:\n%s", want, out)
		}
	}
	conn := dbtest.Conn(t)
	var acc float64
	if err := conn.QueryRow(t.Context(), `SELECT accuracy FROM "`+reg+`".comparisons`).Scan(&acc); err != nil {
		t.Fatal(err)
	}
	if acc < 0.95 {
		t.Errorf("demo clusters match the invented populations with accuracy %.4f, want at least 0.95", acc)
	}
}
