package fit

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// exportCases are small restored mixtures, one per covariance structure,
// d = 3, k = 2 (weights, means and matrices invented for the test).
func exportCases() []struct {
	name   string
	cov    Covariance
	w, mu  []float64
	sigmas []float64
} {
	full := []float64{
		2.0, 0.6, -0.3,
		0.6, 1.5, 0.2,
		-0.3, 0.2, 0.8,
		0.5, -0.1, 0.05,
		-0.1, 0.9, 0.3,
		0.05, 0.3, 1.7,
	}
	diag := []float64{
		2.0, 0, 0, 0, 1.5, 0, 0, 0, 0.8,
		0.5, 0, 0, 0, 0.9, 0, 0, 0, 1.7,
	}
	sph := []float64{
		1.3, 0, 0, 0, 1.3, 0, 0, 0, 1.3,
		0.4, 0, 0, 0, 0.4, 0, 0, 0, 0.4,
	}
	pooled := append(append([]float64(nil), full[:9]...), full[:9]...)
	w := []float64{0.65, 0.35}
	mu := []float64{0.5, -1, 2, 3, 1.5, -0.5}
	return []struct {
		name   string
		cov    Covariance
		w, mu  []float64
		sigmas []float64
	}{
		{"full", CovFull, w, mu, full},
		{"diag", CovDiag, w, mu, diag},
		{"spherical", CovSpherical, w, mu, sph},
		{"pooled", CovPooled, w, mu, pooled},
	}
}

// TestFactorsAgainstGonum checks each returned constant against gonum
// (a general-purpose library): L Lᵀ = Σ with gonum's Cholesky factor,
// invDiag = 1/L_aa, and logNorm_k − ½ zᵀz = ln π_k + ln φ(x; μ_k, Σ_k) at
// random rows, with the normal log density
// ln φ = −½(d ln 2π + ln|Σ| + (x − μ)ᵀ Σ⁻¹ (x − μ)) (common practice)
// evaluated through gonum's LU factorisation (mat.LU: LogDet and a solve),
// not through a Cholesky factor.
func TestFactorsAgainstGonum(t *testing.T) {
	const d, k = 3, 2
	q := d * (d + 1) / 2
	for _, c := range exportCases() {
		t.Run(c.name, func(t *testing.T) {
			m, err := RestoreMixture(c.cov, d, c.w, c.mu, c.sigmas)
			if err != nil {
				t.Fatal(err)
			}
			chol, invDiag, logNorm, diagonal := m.Factors()
			if want := c.cov == CovDiag || c.cov == CovSpherical; diagonal != want {
				t.Fatalf("diagonal = %v, want %v", diagonal, want)
			}
			if len(chol) != k*q || len(invDiag) != k*d || len(logNorm) != k {
				t.Fatalf("lengths %d, %d, %d; want %d, %d, %d", len(chol), len(invDiag), len(logNorm), k*q, k*d, k)
			}
			rng := rand.New(rand.NewPCG(3, 4))
			for j := range k {
				sym := mat.NewSymDense(d, append([]float64(nil), c.sigmas[j*d*d:(j+1)*d*d]...))
				var ch mat.Cholesky
				if !ch.Factorize(sym) {
					t.Fatalf("component %d: gonum cannot factorise", j)
				}
				var lt mat.TriDense
				ch.LTo(&lt)
				for a := range d {
					for b := 0; b <= a; b++ {
						got, want := chol[j*q+a*(a+1)/2+b], lt.At(a, b)
						if math.Abs(got-want) > 1e-14*(1+math.Abs(want)) {
							t.Errorf("component %d: L[%d,%d] = %v, gonum %v", j, a, b, got, want)
						}
					}
					if got, want := invDiag[j*d+a], 1/lt.At(a, a); math.Abs(got-want) > 1e-14*math.Abs(want) {
						t.Errorf("component %d: invDiag[%d] = %v, want %v", j, a, got, want)
					}
				}
				var lu mat.LU
				lu.Factorize(sym)
				logDet, sign := lu.LogDet()
				if sign <= 0 {
					t.Fatalf("component %d: determinant sign %v", j, sign)
				}
				for range 20 {
					x := []float64{rng.NormFloat64() * 2, rng.NormFloat64() * 2, rng.NormFloat64() * 2}
					got := logNorm[j] - 0.5*mahalFromFactors(x, c.mu[j*d:(j+1)*d], chol[j*q:(j+1)*q], invDiag[j*d:(j+1)*d], diagonal)
					r := mat.NewVecDense(d, nil)
					for a := range d {
						r.SetVec(a, x[a]-c.mu[j*d+a])
					}
					var sol mat.VecDense
					if err := lu.SolveVecTo(&sol, false, r); err != nil {
						t.Fatal(err)
					}
					want := math.Log(c.w[j]) - 0.5*(float64(d)*math.Log(2*math.Pi)+logDet+mat.Dot(r, &sol))
					if math.Abs(got-want) > 1e-12*(1+math.Abs(want)) {
						t.Errorf("component %d at %v: l = %v, gonum ln π + ln φ = %v", j, x, got, want)
					}
				}
			}
		})
	}
}

// mahalFromFactors is the squared Mahalanobis length as Factors documents
// it: z by forward substitution (or the diagonal shortcut), summed z²,
// every product rounded before it is added, as PostgreSQL rounds it.
func mahalFromFactors(x, mu, l, inv []float64, diagonal bool) float64 {
	d := len(x)
	z := make([]float64, d)
	var m float64
	for a := range d {
		s := x[a] - mu[a]
		if !diagonal {
			for b := range a {
				s -= float64(l[a*(a+1)/2+b] * z[b])
			}
		}
		s *= inv[a]
		z[a] = s
		m += float64(s * s)
	}
	return m
}

// TestFactorsRepeatPosterior pins the contract the SQL scoring functions
// rely on: from Factors alone, in Posterior's order of operations, the
// label (first k with exp(l_k − max l) = 1), the membership of the label
// (1/Σ exp(l_j − max l)) and ln p(x) (max l + ln Σ) come out bit for bit as
// Posterior's, here for every structure and rows near and far, including
// rows exactly between two identical components.
func TestFactorsRepeatPosterior(t *testing.T) {
	const d = 3
	q := d * (d + 1) / 2
	for _, c := range exportCases() {
		t.Run(c.name, func(t *testing.T) {
			// A third component equal to the first makes exact ties.
			w := []float64{c.w[0] / 2, c.w[1], c.w[0] / 2}
			mu := append(append([]float64(nil), c.mu...), c.mu[:d]...)
			sig := append(append([]float64(nil), c.sigmas...), c.sigmas[:d*d]...)
			m, err := RestoreMixture(c.cov, d, w, mu, sig)
			if err != nil {
				t.Fatal(err)
			}
			chol, invDiag, logNorm, diagonal := m.Factors()
			k := len(logNorm)
			rng := rand.New(rand.NewPCG(5, 6))
			dst := make([]float64, k)
			l := make([]float64, k)
			for i := range 2000 {
				scale := 1.0
				if i%10 == 0 {
					scale = 60 // far rows: most exp terms underflow
				}
				x := []float64{rng.NormFloat64() * scale, rng.NormFloat64() * scale, rng.NormFloat64() * scale}
				label, prob, logd, _ := m.Posterior(dst, x)
				best := math.Inf(-1)
				for j := range k {
					l[j] = logNorm[j] - float64(0.5*mahalFromFactors(x, mu[j*d:(j+1)*d], chol[j*q:(j+1)*q], invDiag[j*d:(j+1)*d], diagonal))
					best = max(best, l[j])
				}
				wantLabel := -1
				var sum float64
				for j := range k {
					e := math.Exp(l[j] - best)
					if e == 1 && wantLabel < 0 {
						wantLabel = j
					}
					sum += e
				}
				if label != wantLabel || prob != 1/sum || logd != best+math.Log(sum) {
					t.Fatalf("row %v: Posterior gives (%d, %v, %v), from Factors (%d, %v, %v)", x, label, prob, logd, wantLabel, 1/sum, best+math.Log(sum))
				}
				if label == 2 {
					t.Fatalf("row %v: label 2 is an exact copy of component 0 and must lose the tie", x)
				}
			}
		})
	}
}

// TestFactorsAreCopies: changing what Factors returns leaves the model
// alone.
func TestFactorsAreCopies(t *testing.T) {
	c := exportCases()[0]
	m, err := RestoreMixture(c.cov, 3, c.w, c.mu, c.sigmas)
	if err != nil {
		t.Fatal(err)
	}
	x := []float64{0.3, -0.2, 1.1}
	dst := make([]float64, 2)
	label, prob, logd, mahal := m.Posterior(dst, x)
	chol, invDiag, logNorm, _ := m.Factors()
	for _, s := range [][]float64{chol, invDiag, logNorm} {
		for i := range s {
			s[i] = 7
		}
	}
	l2, p2, ld2, m2 := m.Posterior(dst, x)
	if l2 != label || p2 != prob || ld2 != logd || m2 != mahal {
		t.Fatalf("Posterior changed after writing into Factors' slices: (%d %v %v %v) then (%d %v %v %v)", label, prob, logd, mahal, l2, p2, ld2, m2)
	}
}

func TestFactorsPanicsWithoutModel(t *testing.T) {
	defer func() {
		r := recover()
		if s, ok := r.(string); !ok || !strings.HasPrefix(s, "fit: ") {
			t.Fatalf("recovered %v, want a fit: panic", r)
		}
	}()
	(&MixtureResult{K: 2}).Factors()
}

// TestReorderedPermutesPosterior checks Reordered on every structure: with
// the components swapped, Posterior gives every row the same memberships
// swapped, bit for bit, the same membership of its label, log density and
// distance, and the same label swapped, so reordering the components
// changes nothing but their order (ties aside, which the first test of
// cmd/assort's renumbering covers).
func TestReorderedPermutesPosterior(t *testing.T) {
	const d = 3
	for _, c := range exportCases() {
		t.Run(c.name, func(t *testing.T) {
			m, err := RestoreMixture(c.cov, d, c.w, c.mu, c.sigmas)
			if err != nil {
				t.Fatal(err)
			}
			r := m.Reordered([]int{1, 0})
			if r.Weights[0] != m.Weights[1] || r.Means[0] != m.Means[d] || r.Covs[0] != m.Covs[d*d] || m.Weights[0] == m.Weights[1] && m.Means[0] == m.Means[d] {
				t.Fatalf("parameters not swapped: weights %v from %v", r.Weights, m.Weights)
			}
			rng := rand.New(rand.NewPCG(9, 9))
			a, b := make([]float64, 2), make([]float64, 2)
			for range 500 {
				x := []float64{2 * rng.NormFloat64(), 2 * rng.NormFloat64(), 2 * rng.NormFloat64()}
				la, pa, lda, da := m.Posterior(a, x)
				lb, pb, ldb, db := r.Posterior(b, x)
				if a[0] != b[1] || a[1] != b[0] || pa != pb || lda != ldb || da != db || (a[0] != a[1] && la != 1-lb) {
					t.Fatalf("row %v: Posterior (%d %v %v %v %v), reordered (%d %v %v %v %v)", x, la, a, pa, lda, da, lb, b, pb, ldb, db)
				}
			}
		})
	}
	m, err := RestoreMixture(CovDiag, 1, []float64{0.5, 0.5}, []float64{0, 1}, []float64{1, 1})
	if err != nil {
		t.Fatal(err)
	}
	for _, bad := range [][]int{{0, 0}, {0}, {1, 2}} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("Reordered(%v) did not panic", bad)
				}
			}()
			m.Reordered(bad)
		}()
	}
}
