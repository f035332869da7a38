package fit

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

func mixClose(got, want, tol float64) bool {
	return math.Abs(got-want) <= tol*max(1, math.Abs(want))
}

// TestWeightedScatter checks the maximum-likelihood weighted scatter on
// hand-computed cases.
func TestWeightedScatter(t *testing.T) {
	cases := []struct {
		name  string
		x     []float64
		d     int
		w     []float64
		total float64
		mean  []float64
		cov   []float64
	}{
		{
			// Rows (0,0), (2,0), (1,3): mean (1,1); deviations (−1,−1),
			// (1,−1), (0,2); scatter [[2,0],[0,6]] / 3.
			name: "unit weights", x: []float64{0, 0, 2, 0, 1, 3}, d: 2,
			total: 3, mean: []float64{1, 1}, cov: []float64{2.0 / 3, 0, 0, 2},
		},
		{
			// Weights 2, 1, 1 on the same rows: W = 4, mean (3/4, 3/4);
			// deviations (−3/4,−3/4), (5/4,−3/4), (1/4,9/4):
			// xx = 2·9/16 + 25/16 + 1/16 = 44/16, xy = 2·9/16 − 15/16 + 9/16 = 12/16,
			// yy = 2·9/16 + 9/16 + 81/16 = 108/16; each divided by 4.
			name: "responsibilities", x: []float64{0, 0, 2, 0, 1, 3}, d: 2, w: []float64{2, 1, 1},
			total: 4, mean: []float64{0.75, 0.75}, cov: []float64{44.0 / 64, 12.0 / 64, 12.0 / 64, 108.0 / 64},
		},
		{
			// One feature, weights 0.5 and 0.5 on 1 and 3: mean 2,
			// variance 1 (the divisor is W = 1, not W − 1 = 0).
			name: "half weights", x: []float64{1, 3}, d: 1, w: []float64{0.5, 0.5},
			total: 1, mean: []float64{2}, cov: []float64{1},
		},
		{
			name: "zero weight", x: []float64{1, 2, 3, 4}, d: 2, w: []float64{0, 0},
			total: 0, mean: []float64{0, 0}, cov: []float64{0, 0, 0, 0},
		},
		{
			// Far from the origin the centred second pass keeps full
			// accuracy: rows 1e9+{0,2,1} in the first feature.
			name: "offset", x: []float64{1e9, 0, 1e9 + 2, 0, 1e9 + 1, 3}, d: 2,
			total: 3, mean: []float64{1e9 + 1, 1}, cov: []float64{2.0 / 3, 0, 0, 2},
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			x := slices.Clone(c.x)
			mean := make([]float64, c.d)
			cov := make([]float64, c.d*c.d)
			total := weightedScatter(mean, cov, x, c.d, c.w)
			if total != c.total {
				t.Errorf("total weight %v, want %v", total, c.total)
			}
			for i := range mean {
				if !mixClose(mean[i], c.mean[i], 1e-15) {
					t.Errorf("mean[%d] = %v, want %v", i, mean[i], c.mean[i])
				}
			}
			for i := range cov {
				if !mixClose(cov[i], c.cov[i], 1e-15) {
					t.Errorf("cov[%d] = %v, want %v", i, cov[i], c.cov[i])
				}
			}
			if !slices.Equal(x, c.x) {
				t.Errorf("input modified")
			}
		})
	}
}

// TestWeightedScatterGonum compares with gonum's stat.CovarianceMatrix,
// which treats weights as frequencies and divides by W − 1 (its
// documentation): the two must differ by exactly that factor.
func TestWeightedScatterGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	const n, d = 200, 4
	x := make([]float64, n*d)
	w := make([]float64, n)
	for i := range x {
		x[i] = rng.NormFloat64()*3 + 10
	}
	for i := range w {
		w[i] = rng.Float64() * 2
	}
	mean := make([]float64, d)
	cov := make([]float64, d*d)
	total := weightedScatter(mean, cov, x, d, w)
	var ref mat.SymDense
	stat.CovarianceMatrix(&ref, mat.NewDense(n, d, x), w)
	for a := range d {
		col := make([]float64, n)
		for i := range n {
			col[i] = x[i*d+a]
		}
		if want := stat.Mean(col, w); !mixClose(mean[a], want, 1e-13) {
			t.Errorf("mean[%d] = %v, gonum %v", a, mean[a], want)
		}
		for b := range d {
			want := ref.At(a, b) * (total - 1) / total
			if !mixClose(cov[a*d+b], want, 1e-12) {
				t.Errorf("cov[%d,%d] = %v, gonum × (W−1)/W = %v", a, b, cov[a*d+b], want)
			}
		}
	}
}

// TestCholPacked checks the packed Cholesky factor on a textbook matrix
// (the 3×3 example [[4,12,−16],[12,37,−43],[−16,−43,98]] with factor
// [[2],[6,1],[−8,5,3]], common practice, from memory), on random
// symmetric positive definite matrices (L Lᵀ = A) and on matrices that are
// not positive definite.
func TestCholPacked(t *testing.T) {
	l := make([]float64, 6)
	if !cholPacked(l, []float64{4, 12, -16, 12, 37, -43, -16, -43, 98}, 3) {
		t.Fatal("textbook matrix reported not positive definite")
	}
	if want := []float64{2, 6, 1, -8, 5, 3}; !slices.Equal(l, want) {
		t.Errorf("factor %v, want %v", l, want)
	}
	for _, c := range []struct {
		name string
		a    []float64
		d    int
	}{
		{"singular", []float64{1, 1, 1, 1}, 2},
		{"indefinite", []float64{1, 2, 2, 1}, 2},
		{"negative", []float64{-1}, 1},
		{"NaN", []float64{math.NaN()}, 1},
	} {
		if cholPacked(make([]float64, triLen(c.d)), c.a, c.d) {
			t.Errorf("%s: reported positive definite", c.name)
		}
	}
	rng := rand.New(rand.NewPCG(7, 8))
	for _, d := range []int{1, 2, 5, 9} {
		a := mixRandomSPD(rng, d)
		l := make([]float64, triLen(d))
		if !cholPacked(l, a, d) {
			t.Fatalf("d=%d: random SPD matrix reported not positive definite", d)
		}
		for i := range d {
			for j := range d {
				var s float64
				for p := 0; p <= min(i, j); p++ {
					s += l[i*(i+1)/2+p] * l[j*(j+1)/2+p]
				}
				if !mixClose(s, a[i*d+j], 1e-13) {
					t.Errorf("d=%d: (L Lᵀ)[%d,%d] = %v, want %v", d, i, j, s, a[i*d+j])
				}
			}
		}
	}
}

// mixRandomSPD returns B Bᵀ + I for a random d×d matrix B.
func mixRandomSPD(rng *rand.Rand, d int) []float64 {
	b := make([]float64, d*d)
	for i := range b {
		b[i] = rng.NormFloat64()
	}
	a := make([]float64, d*d)
	for i := range d {
		for j := range d {
			var s float64
			for p := range d {
				s += b[i*d+p] * b[j*d+p]
			}
			a[i*d+j] = s
		}
		a[i*d+i]++
	}
	return a
}

// TestForwardPacked checks zᵀ A⁻¹ z from the forward substitution against
// gonum's dense solve (mat.Dense.Solve, an LU factorisation).
func TestForwardPacked(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	for _, d := range []int{1, 3, 8} {
		a := mixRandomSPD(rng, d)
		l := make([]float64, triLen(d))
		cholPacked(l, a, d)
		inv := make([]float64, d)
		for i := range d {
			inv[i] = 1 / l[i*(i+1)/2+i]
		}
		z := make([]float64, d)
		for i := range z {
			z[i] = rng.NormFloat64()
		}
		var sol mat.VecDense
		if err := sol.SolveVec(mat.NewDense(d, d, a), mat.NewVecDense(d, slices.Clone(z))); err != nil {
			t.Fatal(err)
		}
		want := mat.Dot(mat.NewVecDense(d, slices.Clone(z)), &sol)
		y := make([]float64, d)
		if got := forwardPacked(y, l, inv, z); !mixClose(got, want, 1e-12) {
			t.Errorf("d=%d: zᵀA⁻¹z = %v, gonum %v", d, got, want)
		}
		zc := slices.Clone(z)
		if got := forwardPacked(zc, l, inv, zc); !mixClose(got, want, 1e-12) {
			t.Errorf("d=%d, in place: zᵀA⁻¹z = %v, gonum %v", d, got, want)
		}
	}
}

// TestMinGenEigen checks the smallest generalised eigenvalue against
// gonum's symmetric eigensolver on B^(−1/2) A B^(−1/2) built from the
// eigendecomposition of B, and on a case known by hand.
func TestMinGenEigen(t *testing.T) {
	// A = diag(1, 8), B = diag(4, 2): ratios 1/4 and 4.
	l := make([]float64, 3)
	cholPacked(l, []float64{4, 0, 0, 2}, 2)
	if got := minGenEigen(make([]float64, 4), []float64{1, 0, 0, 8}, l, 2); !mixClose(got, 0.25, 1e-15) {
		t.Errorf("diagonal case: %v, want 0.25", got)
	}
	rng := rand.New(rand.NewPCG(11, 12))
	const d = 5
	a, b := mixRandomSPD(rng, d), mixRandomSPD(rng, d)
	lb := make([]float64, triLen(d))
	cholPacked(lb, b, d)
	got := minGenEigen(make([]float64, d*d), a, lb, d)
	var eb mat.EigenSym
	eb.Factorize(mat.NewSymDense(d, b), true)
	var v mat.Dense
	eb.VectorsTo(&v)
	vals := eb.Values(nil)
	// B^(−1/2) = V diag(1/√λ) Vᵀ.
	s := mat.NewDense(d, d, nil)
	for i := range d {
		for j := range d {
			var x float64
			for p := range d {
				x += v.At(i, p) * v.At(j, p) / math.Sqrt(vals[p])
			}
			s.Set(i, j, x)
		}
	}
	var m mat.Dense
	m.Product(s, mat.NewDense(d, d, a), s)
	sym := mat.NewSymDense(d, nil)
	for i := range d {
		for j := i; j < d; j++ {
			sym.SetSym(i, j, (m.At(i, j)+m.At(j, i))/2)
		}
	}
	var e mat.EigenSym
	e.Factorize(sym, false)
	if want := e.Values(nil)[0]; !mixClose(got, want, 1e-10) {
		t.Errorf("random case: %v, want %v", got, want)
	}
}

// TestParamCount checks the free-parameter counts on small cases worked by
// hand: k−1 weights, k·d means, and the covariance entries.
func TestParamCount(t *testing.T) {
	for _, c := range []struct {
		cov     Covariance
		k, d, p int
	}{
		{CovFull, 2, 2, 1 + 4 + 2*3},
		{CovFull, 3, 4, 2 + 12 + 3*10},
		{CovDiag, 3, 4, 2 + 12 + 12},
		{CovSpherical, 3, 4, 2 + 12 + 3},
		{CovPooled, 3, 4, 2 + 12 + 10},
		{CovFull, 1, 1, 0 + 1 + 1},
	} {
		if got := paramCount(c.cov, c.k, c.d); got != c.p {
			t.Errorf("%s k=%d d=%d: %d parameters, want %d", c.cov, c.k, c.d, got, c.p)
		}
	}
}
