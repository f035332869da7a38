package fit

import (
	"context"
	"errors"
	"math/rand/v2"
	"slices"
	"testing"
)

// kmSeed runs seedGreedy on src with a PCG stream (seed, 0).
func kmSeed(t *testing.T, src Source, k, trials, workers int, seed uint64) ([]float64, int64, error) {
	t.Helper()
	sum, err := summarize(context.Background(), src, workers)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 0))
	return seedGreedy(context.Background(), src, &sum.chunkLayout, k, trials, workers, rng, make([]float64, src.Len()))
}

func TestSeedPicksDistinctRows(t *testing.T) {
	// 400 rows with many duplicates: only 40 distinct rows.
	rng := rand.New(rand.NewPCG(3, 3))
	base := kmRandRows(rng, 40, 3)
	x := make([]float64, 0, 400*3)
	for i := range 400 {
		x = append(x, base[(i*7%40)*3:(i*7%40)*3+3]...)
	}
	src := &Dense{N: 400, D: 3, X: x, ChunkRows: 64}
	tests := []struct {
		name      string
		k, trials int
	}{
		{"greedy K 10", 10, 4},
		{"plain k-means++ K 10", 10, 1},
		{"every distinct row", 40, 3},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c, _, err := kmSeed(t, src, tt.k, tt.trials, 2, 99)
			if err != nil {
				t.Fatal(err)
			}
			if len(c) != tt.k*3 {
				t.Fatalf("%d values, want %d", len(c), tt.k*3)
			}
			checkDistinctRows(t, c, base, tt.k, 3)
		})
	}
}

func TestSeedReproducible(t *testing.T) {
	x := kmBlobs(5_000, 4, 7, 5)
	src := &Dense{N: 5_000, D: 4, X: x, ChunkRows: 300}
	ref, refEvals, err := kmSeed(t, src, 7, 3, 1, 12)
	if err != nil {
		t.Fatal(err)
	}
	// Greedy k-means++: n for the first centre, then per further centre
	// n·trials to rate the candidates and n to update D², except after the
	// last centre.
	if want := int64(5_000 * (1 + 6*3 + 5)); refEvals != want {
		t.Errorf("evals = %d, want %d", refEvals, want)
	}
	for _, workers := range []int{1, 2, 8} {
		c, evals, err := kmSeed(t, src, 7, 3, workers, 12)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(c, ref) || evals != refEvals {
			t.Errorf("workers %d: centres %v, want %v", workers, c, ref)
		}
	}
	// Seven blobs 10 apart with unit noise: a row of a covered blob has
	// D² ≈ 8 against ≥ 400 for the others, so even at the last step all
	// three candidates fall in covered blobs with probability below 2e-3,
	// and greedy k-means++ puts one centre in each blob.
	seen := map[int]bool{}
	for j := range 7 {
		blob := int(ref[j*4]/10 + 0.5)
		if seen[blob] {
			t.Errorf("two centres in blob %d: %v", blob, ref)
		}
		seen[blob] = true
	}
}

func TestSeedFewDistinct(t *testing.T) {
	x := []float64{2, 2, 2, 5, 5, 9, 9, 9}
	tests := []struct {
		name    string
		k       int
		wantErr bool
	}{
		{"K equals distinct rows", 3, false},
		{"K above distinct rows", 4, true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c, _, err := kmSeed(t, NewDense(x, 1), tt.k, 2, 1, 1)
			if tt.wantErr {
				if !errors.Is(err, errFewDistinct) {
					t.Errorf("error %v, want errFewDistinct", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			slices.Sort(c)
			if !slices.Equal(c, []float64{2, 5, 9}) {
				t.Errorf("centres %v, want 2, 5, 9", c)
			}
		})
	}
}

func TestSampleRow(t *testing.T) {
	// Chunks of 2 rows; D² = [0 1 | 0 0 | 3 0 | 2 2]; chunk sums 1, 0, 3, 4
	// and cumulative bounds 1, 1, 4, 8.
	lay := &chunkLayout{first: []int{0, 2, 4, 6}, rows: []int{2, 2, 2, 2}}
	closest := []float64{0, 1, 0, 0, 3, 0, 2, 2}
	pot := []float64{1, 0, 3, 4}
	tests := []struct {
		u    float64
		want int
	}{
		{0, 1},
		{0.999, 1},
		{1, 4}, // the empty chunk and zero rows are skipped
		{3.999, 4},
		{4, 6},
		{5.999, 6},
		{6, 7},
		{7.999, 7},
		{8, 7},   // beyond the total by rounding: last positive row
		{100, 7}, // likewise
	}
	for _, tt := range tests {
		if got := sampleRow(tt.u, pot, lay, closest); got != tt.want {
			t.Errorf("sampleRow(%v) = %d, want %d", tt.u, got, tt.want)
		}
	}
}

func TestSeedCentersEntryPoint(t *testing.T) {
	x := kmBlobs(1_000, 2, 4, 21)
	c, err := seedCenters(context.Background(), NewDense(x, 2), 4, 0, 2, rand.New(rand.NewPCG(4, 0)))
	if err != nil {
		t.Fatal(err)
	}
	if len(c) != 8 {
		t.Fatalf("%d values, want 8", len(c))
	}
	if _, err := seedCenters(context.Background(), NewDense(x, 2), 1001, 0, 2, rand.New(rand.NewPCG(4, 0))); err == nil {
		t.Error("K above the rows: no error")
	}
}

// checkDistinctRows fails the test unless the k centres c (d features each)
// are k distinct rows of base.
func checkDistinctRows(t *testing.T, c, base []float64, k, d int) {
	t.Helper()
	for j := range k {
		cj := c[j*d : (j+1)*d]
		isRow := false
		for i := range len(base) / d {
			isRow = isRow || slices.Equal(cj, base[i*d:(i+1)*d])
		}
		if !isRow {
			t.Errorf("centre %d = %v is not a row", j, cj)
		}
		for i := range j {
			if slices.Equal(cj, c[i*d:(i+1)*d]) {
				t.Errorf("centres %d and %d are both %v", i, j, cj)
			}
		}
	}
}
