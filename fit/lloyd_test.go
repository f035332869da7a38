package fit

import (
	"context"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// kmNaiveNearest is the definition Nearest must match bit for bit: distances
// summed in feature order, first strict minimum.
func kmNaiveNearest(centers []float64, d int, x []float64) (int, float64) {
	bi, best := -1, math.Inf(1)
	for k := range len(centers) / d {
		var s float64
		for j := range d {
			t := x[j] - centers[k*d+j]
			s += float64(t * t)
		}
		if bi < 0 || s < best {
			bi, best = k, s
		}
	}
	return bi, best
}

func kmRandRows(rng *rand.Rand, n, d int) []float64 {
	x := make([]float64, n*d)
	for i := range x {
		x[i] = rng.NormFloat64()*3 + float64(i%d)
	}
	return x
}

func TestNearestMatchesDefinition(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for d := 1; d <= 9; d++ {
		for k := 1; k <= 11; k++ {
			centers := kmRandRows(rng, k, d)
			rows := kmRandRows(rng, 50, d)
			label := make([]int32, 50)
			dist := make([]float64, 50)
			Assign(label, dist, centers, d, rows)
			onlyLabel := make([]int32, 50)
			Assign(onlyLabel, nil, centers, d, rows)
			onlyDist := make([]float64, 50)
			Assign(nil, onlyDist, centers, d, rows)
			for i := range 50 {
				x := rows[i*d : (i+1)*d]
				wl, wd := kmNaiveNearest(centers, d, x)
				gl, gd := Nearest(centers, d, x)
				if gl != wl || gd != wd {
					t.Fatalf("d=%d k=%d row %d: Nearest = (%d, %v), want (%d, %v)", d, k, i, gl, gd, wl, wd)
				}
				if int(label[i]) != wl || dist[i] != wd || int(onlyLabel[i]) != wl || onlyDist[i] != wd {
					t.Fatalf("d=%d k=%d row %d: Assign = (%d, %v), (%d), (%v); want (%d, %v)", d, k, i, label[i], dist[i], onlyLabel[i], onlyDist[i], wl, wd)
				}
			}
		}
	}
}

func TestNearestTiesAndCases(t *testing.T) {
	tests := []struct {
		name    string
		centers []float64
		d       int
		row     []float64
		label   int
		dist2   float64
	}{
		// The row is equidistant from all centres: lowest index wins.
		{"tie among five", []float64{1, 0, -1, 0, 0, 1, 0, -1, 1, 0}, 2, []float64{0, 0}, 0, 1},
		{"tie of later pair", []float64{5, 5, 1, 0, -1, 0, 9, 9, 0, 1, 0, -1}, 2, []float64{0, 0}, 1, 1},
		{"exact hit on centre 6", []float64{0, 1, 2, 3, 4, 5, 6, 7}, 1, []float64{6}, 6, 0},
		{"one centre", []float64{1, 2, 3}, 3, []float64{2, 4, 6}, 0, 1 + 4 + 9},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			l, s := Nearest(tt.centers, tt.d, tt.row)
			if l != tt.label || s != tt.dist2 {
				t.Errorf("Nearest = (%d, %v), want (%d, %v)", l, s, tt.label, tt.dist2)
			}
		})
	}
}

func TestAssignPanicsOnShape(t *testing.T) {
	tests := []struct {
		name string
		f    func()
	}{
		{"ragged centres", func() { Nearest([]float64{1, 2, 3}, 2, []float64{1, 2}) }},
		{"row too short", func() { Nearest([]float64{1, 2}, 2, []float64{1}) }},
		{"no centres", func() { Nearest(nil, 2, []float64{1, 2}) }},
		{"ragged rows", func() { Assign(nil, nil, []float64{1, 2}, 2, []float64{1, 2, 3}) }},
		{"short labels", func() { Assign(make([]int32, 1), nil, []float64{1, 2}, 2, []float64{1, 2, 3, 4}) }},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Error("no panic")
				}
			}()
			tt.f()
		})
	}
}

// kmLloydFrom runs Lloyd's iterations from hand-picked centres, as KMeans does
// after seeding.
func kmLloydFrom(t testing.TB, src Source, centers []float64, maxIter int, tol float64, workers int) *lloydOutcome {
	t.Helper()
	sum, err := summarize(context.Background(), src, workers)
	if err != nil {
		t.Fatal(err)
	}
	var tolAbs float64
	for _, v := range sum.variances() {
		tolAbs += v
	}
	run := newLloydRun(src, len(centers)/src.Dim(), workers)
	out, err := run.lloyd(context.Background(), centers, maxIter, tol*tolAbs)
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// kmDirectInertia recomputes Σ_i min_k Σ_j (x_ij − c_kj)² naively.
func kmDirectInertia(x []float64, d int, centers []float64) (float64, []int64) {
	sizes := make([]int64, len(centers)/d)
	var s float64
	for i := 0; i < len(x); i += d {
		l, v := kmNaiveNearest(centers, d, x[i:i+d])
		sizes[l]++
		s += v
	}
	return s, sizes
}

func TestLloydHandChecked(t *testing.T) {
	// Two groups on a line, {0, 1, 2} and {10, 11, 12, 13}, started from
	// two points of the first group. By hand: iteration 1 assigns 0 → c=0,
	// the rest → c=1, giving centres 0 and 49/6; iteration 2 assigns
	// {0, 1, 2} | {10..13}, centres 1 and 11.5; iteration 3 changes nothing.
	// Inertia = (1+0+1) + (2.25+0.25+0.25+2.25) = 7.
	x := []float64{0, 1, 2, 10, 11, 12, 13}
	out := kmLloydFrom(t, NewDense(x, 1), []float64{0, 1}, 100, 0, 1)
	if !slices.Equal(out.centers, []float64{1, 11.5}) {
		t.Errorf("centres = %v, want [1 11.5]", out.centers)
	}
	if !slices.Equal(out.sizes, []int64{3, 4}) || out.inertia != 7 {
		t.Errorf("sizes = %v inertia = %v, want [3 4] and 7", out.sizes, out.inertia)
	}
	if out.iterations != 3 || out.stop != stopUnchanged || !out.converged {
		t.Errorf("iterations = %d stop = %q converged = %v, want 3, %q, true", out.iterations, out.stop, out.converged, stopUnchanged)
	}
	// 3 passes of n·K distances.
	if out.evals != 3*7*2 {
		t.Errorf("evals = %d, want %d", out.evals, 3*7*2)
	}
}

func TestLloydStops(t *testing.T) {
	x := []float64{0, 1, 2, 10, 11, 12, 13}
	tests := []struct {
		name      string
		maxIter   int
		tol       float64
		stop      string
		converged bool
		iters     int
	}{
		{"iteration limit", 1, 0, stopLimit, false, 1},
		// By hand: iteration 1 moves the centres from (0, 1) to (0, 49/6),
		// shift (43/6)² ≈ 51.4; iteration 2 to (1, 11.5), shift
		// 1 + (10/3)² ≈ 12.1. The population variance of x is 196/7 = 28,
		// so Tol = 1 (28) stops after iteration 2 and not before.
		{"shift below tolerance", 100, 1, stopShift, true, 2},
		{"unchanged", 100, 0, stopUnchanged, true, 3},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			out := kmLloydFrom(t, NewDense(x, 1), []float64{0, 1}, tt.maxIter, tt.tol, 1)
			if out.stop != tt.stop || out.converged != tt.converged || out.iterations != tt.iters {
				t.Errorf("stop = %q converged = %v iterations = %d, want %q %v %d", out.stop, out.converged, out.iterations, tt.stop, tt.converged, tt.iters)
			}
			// Whatever the stop, sizes and inertia belong to the final centres.
			in, sizes := kmDirectInertia(x, 1, out.centers)
			if out.inertia != in || !slices.Equal(out.sizes, sizes) {
				t.Errorf("inertia %v sizes %v, direct %v %v", out.inertia, out.sizes, in, sizes)
			}
		})
	}
}

func TestLloydReseedsEmptyClusters(t *testing.T) {
	tests := []struct {
		name     string
		x        []float64
		d        int
		start    []float64
		reseeded int
		centers  []float64
		sizes    []int64
	}{
		{
			// Centre 1 at 100 attracts nothing. The row farthest from its
			// centre after pass 1 (centre 0 at 0) is 9 (81), so cluster 1
			// restarts at 9; then {0,1,2} | {8,9} settle.
			name: "one empty", x: []float64{0, 1, 2, 8, 9}, d: 1,
			start: []float64{0, 100}, reseeded: 1,
			centers: []float64{1, 8.5}, sizes: []int64{3, 2},
		},
		{
			// Centres 1 and 2 both far away: pass 1 puts every row in
			// cluster 0 (centre 0). Farthest rows: 31 (961), then 30
			// (900); cluster 1 takes 31 and cluster 2 takes 30. By hand
			// the next passes give {0,1,20} {31} {21,30}, then
			// {0,1} {30,31} {20,21}, which is stable.
			name: "two empty at once", x: []float64{0, 1, 20, 21, 30, 31}, d: 1,
			start: []float64{0, -100, -200}, reseeded: 2,
			centers: []float64{0.5, 30.5, 20.5}, sizes: []int64{2, 2, 2},
		},
		{
			// Ties in distance: rows 3 and 4 ({0,5} and {5,0}) are both at
			// 25 from centre (0,0); the lower row, 3, is taken.
			name: "tie takes lower row", x: []float64{0, 0, 0, 0, 0, 0, 0, 5, 5, 0}, d: 2,
			start: []float64{0, 0, 50, 50}, reseeded: 1,
			centers: []float64{1.25, 0, 0, 5}, sizes: []int64{4, 1},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			out := kmLloydFrom(t, NewDense(tt.x, tt.d), tt.start, 100, 0, 2)
			if out.reseeded != tt.reseeded {
				t.Errorf("reseeded = %d, want %d", out.reseeded, tt.reseeded)
			}
			if !slices.Equal(out.centers, tt.centers) || !slices.Equal(out.sizes, tt.sizes) {
				t.Errorf("centres %v sizes %v, want %v %v", out.centers, out.sizes, tt.centers, tt.sizes)
			}
			if !out.converged {
				t.Errorf("not converged: %q", out.stop)
			}
		})
	}
}

// Benchmarks ----------------------------------------------------------------

func BenchmarkAssign(b *testing.B) {
	const n, d, k = 1_000_000, 8, 8
	rng := rand.New(rand.NewPCG(7, 7))
	rows := kmRandRows(rng, n, d)
	centers := kmRandRows(rng, k, d)
	label := make([]int32, n)
	dist := make([]float64, n)
	b.SetBytes(int64(n * d * 8))
	b.ResetTimer()
	for b.Loop() {
		Assign(label, dist, centers, d, rows)
	}
	perOp := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(float64(n)/perOp, "rows/s")
	b.ReportMetric(perOp*1e9/float64(n*k*d), "ns/madd")
}

// BenchmarkLloydPass measures one parallel assignment pass of Lloyd's
// iterations (assignment, label comparison, per-chunk sums folded in chunk
// order) over 10^6 rows × 8 features with K = 8, on GOMAXPROCS workers.
func BenchmarkLloydPass(b *testing.B) {
	const n, d, k = 1_000_000, 8, 8
	rng := rand.New(rand.NewPCG(7, 7))
	src := NewDense(kmRandRows(rng, n, d), d)
	centers := kmRandRows(rng, k, d)
	run := newLloydRun(src, k, 0)
	b.ResetTimer()
	for b.Loop() {
		if err := run.pass(context.Background(), centers); err != nil {
			b.Fatal(err)
		}
	}
	perOp := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(float64(n)/perOp, "rows/s")
}
