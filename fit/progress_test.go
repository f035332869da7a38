package fit

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
)

// progressBlobs is n rows of 2 features around three centres.
func progressBlobs(n int, seed uint64) *Dense {
	rng := rand.New(rand.NewPCG(seed, 7))
	centres := [][2]float64{{0, 0}, {4, 1}, {1, 5}}
	x := make([]float64, 0, 2*n)
	for i := range n {
		c := centres[i%3]
		x = append(x, c[0]+rng.NormFloat64(), c[1]+rng.NormFloat64())
	}
	return NewDense(x, 2)
}

// TestProgress checks the progress reports of both methods: one call per
// iteration of every restart, numbered from 1, the winning restart's count
// equal to the result's Iterations, and the objective moving the right way
// (Lloyd's inertia never rises; EM's log-likelihood never falls: both are
// the methods' monotonicity properties, common practice).
func TestProgress(t *testing.T) {
	src := progressBlobs(3000, 5)
	type call struct {
		restart, it int
		obj         float64
	}
	var calls []call
	record := func(r, it int, obj float64) { calls = append(calls, call{r, it, obj}) }
	check := func(name string, restarts, winner, iterations int, better func(prev, cur float64) bool) {
		t.Helper()
		last := map[int]call{}
		for _, c := range calls {
			p, seen := last[c.restart]
			if (!seen && c.it != 1) || (seen && c.it != p.it+1) {
				t.Fatalf("%s: restart %d reported iteration %d after %d", name, c.restart, c.it, p.it)
			}
			if seen && !better(p.obj, c.obj) {
				t.Errorf("%s: restart %d, iteration %d: objective %v after %v", name, c.restart, c.it, c.obj, p.obj)
			}
			last[c.restart] = c
		}
		if len(last) != restarts || last[winner].it != iterations {
			t.Errorf("%s: %d restarts reported, winner's last iteration %d; want %d restarts and %d", name, len(last), last[winner].it, restarts, iterations)
		}
	}
	km, err := KMeans(context.Background(), src, KMeansConfig{K: 3, Seed: 2, Restarts: 3, Algorithm: AlgorithmLloyd, Progress: record})
	if err != nil {
		t.Fatal(err)
	}
	check("k-means", 3, km.Restart, km.Iterations, func(prev, cur float64) bool { return cur <= prev*(1+1e-12) })
	calls = nil
	mx, err := Mixture(context.Background(), src, MixtureConfig{K: 3, Seed: 2, Restarts: 2, Reg: 1e-14, Progress: record})
	if err != nil {
		t.Fatal(err)
	}
	check("mixture", 2, mx.Restart, mx.Iterations+1, func(prev, cur float64) bool { return cur >= prev-1e-9*math.Abs(prev) })
	// Hamerly's passes skip rows, so their objective is not known.
	calls = nil
	if _, err := KMeans(context.Background(), src, KMeansConfig{K: 3, Seed: 2, Restarts: 1, Algorithm: AlgorithmHamerly, Progress: record}); err != nil {
		t.Fatal(err)
	}
	if len(calls) == 0 || !math.IsNaN(calls[len(calls)-1].obj) {
		t.Errorf("Hamerly progress %v, want NaN objectives", calls)
	}
}
