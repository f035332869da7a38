package fit

import (
	"math"
	"math/rand/v2"
	"testing"
)

// kmNaiveTwo is the definition nearestTwo must match: kmNaiveNearest's
// label and distance (first strict minimum, NaN never taken, centre 0 when
// nothing is finite) and the smallest non-NaN distance to another centre.
func kmNaiveTwo(centers []float64, d int, x []float64) (int, float64, float64) {
	k := len(centers) / d
	dist := make([]float64, k)
	bi, best := -1, math.Inf(1)
	for j := range k {
		var s float64
		for f := range d {
			t := x[f] - centers[j*d+f]
			s += float64(t * t)
		}
		dist[j] = s
		if s < best {
			bi, best = j, s
		}
	}
	if bi < 0 {
		return 0, dist[0], 0
	}
	second := math.Inf(1)
	for j, s := range dist {
		if j != bi && s < second {
			second = s
		}
	}
	return bi, best, second
}

func TestNearestTwoMatchesDefinition(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	type tc struct {
		name    string
		d       int
		centers []float64
		rows    []float64
	}
	var tests []tc
	for d := 1; d <= 9; d++ {
		for k := 1; k <= 9; k++ {
			tests = append(tests, tc{name: "random", d: d, centers: kmRandRows(rng, k, d), rows: kmRandRows(rng, 40, d)})
			// Integer grids: exact ties between distances everywhere.
			tests = append(tests, tc{name: "grid", d: d, centers: kmGrid(k, d, 3, uint64(d*10+k)), rows: kmGrid(40, d, 3, uint64(d*10+k+100))})
		}
	}
	inf, nan := math.Inf(1), math.NaN()
	tests = append(tests,
		tc{"NaN centre skipped", 2, []float64{nan, 0, 3, 4, 1, 1, 0, 0}, []float64{0, 0, 1, 2}},
		tc{"infinite centres", 2, []float64{inf, 0, 0, inf, 1, 1}, []float64{0, 0, 5, 5}},
		tc{"nothing finite", 4, []float64{inf, 0, 0, 0, nan, 0, 0, 0}, []float64{1, 2, 3, 4}},
		tc{"nothing finite d=8", 8, []float64{inf, 0, 0, 0, 0, 0, 0, 0}, make([]float64, 8)},
		tc{"overflow to +Inf", 1, []float64{-1e200, 1e200, 0}, []float64{1e200, -1e200}},
	)
	for _, tt := range tests {
		d := tt.d
		for i := range len(tt.rows) / d {
			x := tt.rows[i*d : (i+1)*d]
			wl, wb, ws := kmNaiveTwo(tt.centers, d, x)
			gl, gb, gs := nearestTwo(tt.centers, d, x)
			if int(gl) != wl || math.Float64bits(gb) != math.Float64bits(wb) || math.Float64bits(gs) != math.Float64bits(ws) {
				t.Fatalf("%s d=%d k=%d row %v: nearestTwo = (%d, %v, %v), want (%d, %v, %v)",
					tt.name, d, len(tt.centers)/d, x, gl, gb, gs, wl, wb, ws)
			}
			// And the label and distance are assignRows's.
			var l [1]int32
			var s [1]float64
			assignRows(l[:], s[:], tt.centers, d, x)
			if l[0] != gl || math.Float64bits(s[0]) != math.Float64bits(gb) {
				t.Fatalf("%s d=%d row %v: assignRows (%d, %v), nearestTwo (%d, %v)", tt.name, d, x, l[0], s[0], gl, gb)
			}
		}
	}
}

// TestVectorKernelMatchesScalar compares assignRows and nearestTwoRows
// with and without the vector kernels (AVX2 on amd64) bit for bit, over shapes that exercise
// every path: row counts that are and are not multiples of 4, centre
// counts that do not fill the last group of four, layouts larger than the
// kernel's stack buffer, exact ties (integer grids), and centres at NaN
// or infinity. Where there is no vector kernel both runs are the pure-Go
// kernels and the test says so.
func TestVectorKernelMatchesScalar(t *testing.T) {
	if !vectorKernel {
		t.Log("no vector kernel on this processor: comparing the pure-Go kernels with themselves")
	}
	rng := rand.New(rand.NewPCG(6, 6))
	type tc struct {
		name    string
		d       int
		centers []float64
		rows    []float64
	}
	var tests []tc
	for _, d := range []int{1, 2, 3, 4, 5, 7, 8, 9, 16, 17} {
		for _, k := range []int{1, 2, 3, 4, 5, 8, 9, 13, 40} {
			for _, n := range []int{8, 9, 10, 11, 37} {
				tests = append(tests,
					tc{"random", d, kmRandRows(rng, k, d), kmRandRows(rng, n, d)},
					tc{"grid", d, kmGrid(k, d, 3, uint64(d*1000+k*10+n)), kmGrid(n, d, 3, uint64(d*1000+k*10+n+1))})
			}
		}
	}
	inf, nan := math.Inf(1), math.NaN()
	specials := kmGrid(12, 2, 4, 99)
	tests = append(tests,
		tc{"NaN and infinite centres", 2, []float64{nan, 0, 3, inf, 1, 1, 0, 0, inf, inf, 2, nan}, specials},
		tc{"nothing finite", 2, []float64{inf, 0, nan, 1, 0, inf}, specials},
		tc{"overflow", 1, []float64{-1e200, 1e200, 0, 5}, []float64{1e200, -1e200, 3, 4, 1e200, 0, 2, 1e-300, 7}},
		tc{"equidistant everywhere", 1, []float64{-1, 1, -1, 1, -1}, make([]float64, 12)},
	)
	saved := vectorKernel
	defer func() { vectorKernel = saved }()
	for _, tt := range tests {
		n := len(tt.rows) / tt.d
		wl, wd := make([]int32, n), make([]float64, n)
		gl, gd := make([]int32, n), make([]float64, n)
		vectorKernel = false
		assignRows(wl, wd, tt.centers, tt.d, tt.rows)
		vectorKernel = saved
		assignRows(gl, gd, tt.centers, tt.d, tt.rows)
		for i := range n {
			if gl[i] != wl[i] || math.Float64bits(gd[i]) != math.Float64bits(wd[i]) {
				t.Fatalf("%s d=%d k=%d n=%d row %d: vector (%d, %v), scalar (%d, %v)",
					tt.name, tt.d, len(tt.centers)/tt.d, n, i, gl[i], gd[i], wl[i], wd[i])
			}
		}
		// nearestTwoRows against nearestTwo row by row.
		ws, gs := make([]float64, n), make([]float64, n)
		vectorKernel = false
		nearestTwoRows(wl, wd, ws, tt.centers, tt.d, tt.rows)
		vectorKernel = saved
		nearestTwoRows(gl, gd, gs, tt.centers, tt.d, tt.rows)
		for i := range n {
			l, b, s := nearestTwo(tt.centers, tt.d, tt.rows[i*tt.d:(i+1)*tt.d])
			for _, r := range []struct {
				l    int32
				b, s float64
			}{{wl[i], wd[i], ws[i]}, {gl[i], gd[i], gs[i]}} {
				if r.l != l || math.Float64bits(r.b) != math.Float64bits(b) || math.Float64bits(r.s) != math.Float64bits(s) {
					t.Fatalf("%s d=%d k=%d n=%d row %d: nearestTwoRows (%d, %v, %v), nearestTwo (%d, %v, %v)",
						tt.name, tt.d, len(tt.centers)/tt.d, n, i, r.l, r.b, r.s, l, b, s)
				}
			}
		}
	}
}
