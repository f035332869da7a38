package fit

import (
	"context"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"strings"
	"testing"
)

// mixFit runs Mixture and fails the test on error.
func mixFit(t testing.TB, x []float64, d int, cfg MixtureConfig) *MixtureResult {
	t.Helper()
	res, err := Mixture(context.Background(), NewDense(x, d), cfg)
	if err != nil {
		t.Fatalf("Mixture(%+v): %v", cfg, err)
	}
	return res
}

var mixStructures = []Covariance{CovFull, CovDiag, CovSpherical, CovPooled}

// TestMixturePosterior checks, on every row of Iris and Old Faithful for
// every structure, that memberships sum to 1 within 1e-9, that the label
// is the highest membership, that the log densities add up to the reported
// log-likelihood, and the Mahalanobis distance against a direct
// computation with the reported mean and covariance.
func TestMixturePosterior(t *testing.T) {
	for _, file := range []string{"iris.csv", "faithful.csv"} {
		x, d := mixReadCSV(t, file)
		for _, cov := range mixStructures {
			t.Run(file+"/"+string(cov), func(t *testing.T) {
				res := mixFit(t, x, d, MixtureConfig{K: 3, Covariance: cov, Seed: 1})
				n := len(x) / d
				tau := make([]float64, res.K)
				var ll, ent float64
				for i := range n {
					row := x[i*d : (i+1)*d]
					label, prob, logp, mahal := res.Posterior(tau, row)
					var s float64
					for k, v := range tau {
						s += v
						if v < 0 || v > 1 {
							t.Fatalf("row %d: membership %d = %v", i, k, v)
						}
						if v > tau[label] || v == tau[label] && k < label {
							t.Fatalf("row %d: label %d (%v) but component %d has %v", i, label, tau[label], k, v)
						}
						if v > 0 {
							ent -= v * math.Log(v)
						}
					}
					if math.Abs(s-1) > 1e-9 {
						t.Fatalf("row %d: memberships sum to %v", i, s)
					}
					if prob != tau[label] {
						t.Fatalf("row %d: prob %v, membership %v", i, prob, tau[label])
					}
					ll += logp
					want := mixDirectMahalanobis(res, label, row)
					if !mixClose(mahal, want, 1e-9) {
						t.Fatalf("row %d: Mahalanobis %v, direct %v", i, mahal, want)
					}
				}
				if !mixClose(ll, res.LogLikelihood, 1e-9) {
					t.Errorf("Σ log p(x) = %v, LogLikelihood %v", ll, res.LogLikelihood)
				}
				if !mixClose(ent, res.ClassEntropy, 1e-8) {
					t.Errorf("entropy from memberships %v, ClassEntropy %v", ent, res.ClassEntropy)
				}
			})
		}
	}
}

// mixDirectMahalanobis solves Σ v = x − μ by Gaussian elimination with
// partial pivoting on the reported covariance and returns √((x − μ)ᵀ v).
func mixDirectMahalanobis(res *MixtureResult, k int, x []float64) float64 {
	d := res.D
	a := slices.Clone(res.Covs[k*d*d : (k+1)*d*d])
	z := make([]float64, d)
	for i := range d {
		z[i] = x[i] - res.Means[k*d+i]
	}
	v := slices.Clone(z)
	for c := range d {
		p := c
		for r := c + 1; r < d; r++ {
			if math.Abs(a[r*d+c]) > math.Abs(a[p*d+c]) {
				p = r
			}
		}
		for j := range d {
			a[c*d+j], a[p*d+j] = a[p*d+j], a[c*d+j]
		}
		v[c], v[p] = v[p], v[c]
		for r := c + 1; r < d; r++ {
			f := a[r*d+c] / a[c*d+c]
			for j := c; j < d; j++ {
				a[r*d+j] -= f * a[c*d+j]
			}
			v[r] -= f * v[c]
		}
	}
	for c := d - 1; c >= 0; c-- {
		for j := c + 1; j < d; j++ {
			v[c] -= a[c*d+j] * v[j]
		}
		v[c] /= a[c*d+c]
	}
	var s float64
	for i := range d {
		s += z[i] * v[i]
	}
	return math.Sqrt(s)
}

// TestMixturePosteriorAllocs checks that scoring a row does not allocate.
func TestMixturePosteriorAllocs(t *testing.T) {
	x, d := mixReadCSV(t, "iris.csv")
	res := mixFit(t, x, d, MixtureConfig{K: 3, Seed: 1})
	tau := make([]float64, 3)
	if a := testing.AllocsPerRun(100, func() { res.Posterior(tau, x[:d]) }); a != 0 {
		t.Errorf("Posterior allocates %v times per row", a)
	}
}

// TestMixtureMonotone checks that the log-likelihood never decreases
// across EM iterations (Dempster, Laird & Rubin 1977, Theorem 1), beyond
// rounding (1e-12 relative) and the tiny covariance floor, except after
// a re-seed.
func TestMixtureMonotone(t *testing.T) {
	iris, di := mixReadCSV(t, "iris.csv")
	faithful, df := mixReadCSV(t, "faithful.csv")
	blobs, _ := mixBlobs(3000, 3, 5, 21)
	for _, c := range []struct {
		name string
		x    []float64
		d, k int
	}{
		{"iris", iris, di, 3},
		{"iris-5", iris, di, 5},
		{"faithful", faithful, df, 2},
		{"faithful-4", faithful, df, 4},
		{"blobs", blobs, 3, 5},
	} {
		for _, cov := range mixStructures {
			for seed := range uint64(3) {
				res, err := Mixture(context.Background(), NewDense(c.x, c.d), MixtureConfig{
					K: c.k, Covariance: cov, Seed: seed, Restarts: 3, Tol: 1e-10, MaxIter: 500, Reg: 1e-14,
				})
				if err != nil {
					t.Fatalf("%s/%s/seed %d: %v", c.name, cov, seed, err)
				}
				if len(res.trace) != res.Iterations+1 {
					t.Fatalf("%s/%s: %d passes for %d iterations", c.name, cov, len(res.trace), res.Iterations)
				}
				for i := 1; i < len(res.trace); i++ {
					if slices.Contains(res.reseeded, i-1) {
						continue
					}
					if drop := res.trace[i-1] - res.trace[i]; drop > 1e-12*math.Abs(res.trace[i]) {
						t.Errorf("%s/%s/seed %d: mean log-likelihood fell by %.3g at iteration %d", c.name, cov, seed, drop, i)
					}
				}
				if got := res.trace[len(res.trace)-1] * float64(res.N); !mixClose(got, res.LogLikelihood, 1e-12) {
					t.Errorf("%s/%s: last pass %v, LogLikelihood %v", c.name, cov, got, res.LogLikelihood)
				}
			}
		}
	}
}

// TestMixtureSingleComponent checks that K = 1 reproduces the sample mean
// and the maximum-likelihood covariance (divided by n), plus the floor, to
// 1e-12 relative, for each structure, on data far from the origin, and
// that the log-likelihood is the Gaussian's in closed form:
// ln L = −n/2 (d ln 2π + ln|Σ|) − ½ Σ_i (x_i − μ)ᵀ Σ⁻¹ (x_i − μ).
func TestMixtureSingleComponent(t *testing.T) {
	iris, d := mixReadCSV(t, "iris.csv")
	for _, offset := range []float64{0, 1e6} {
		x := slices.Clone(iris)
		for i := range x {
			x[i] += offset
		}
		n := len(x) / d
		mean := make([]float64, d)
		cov := make([]float64, d*d)
		weightedScatter(mean, cov, x, d, nil)
		var meanVar float64
		for a := range d {
			meanVar += cov[a*d+a] / float64(d)
		}
		floor := 1e-6 * meanVar
		for _, st := range mixStructures {
			res := mixFit(t, x, d, MixtureConfig{K: 1, Covariance: st, Restarts: 1})
			want := make([]float64, d*d)
			for a := range d {
				for b := range d {
					switch st {
					case CovFull, CovPooled:
						want[a*d+b] = cov[a*d+b]
					case CovDiag:
						if a == b {
							want[a*d+b] = cov[a*d+b]
						}
					case CovSpherical:
						if a == b {
							want[a*d+b] = meanVar
						}
					}
				}
				want[a*d+a] += floor
			}
			if res.Weights[0] != 1 {
				t.Errorf("offset %g, %s: weight %v", offset, st, res.Weights[0])
			}
			for a := range d {
				if !mixClose(res.Means[a], mean[a], 1e-12) {
					t.Errorf("offset %g, %s: mean[%d] = %v, want %v", offset, st, a, res.Means[a], mean[a])
				}
			}
			scale := 0.0
			for _, v := range want {
				scale = max(scale, math.Abs(v))
			}
			for i := range want {
				if math.Abs(res.Covs[i]-want[i]) > 1e-12*scale {
					t.Errorf("offset %g, %s: cov[%d] = %v, want %v", offset, st, i, res.Covs[i], want[i])
				}
			}
			var logDet, maha float64
			wantRes := &MixtureResult{D: d, Means: mean, Covs: want}
			for i := range n {
				m := mixDirectMahalanobis(wantRes, 0, x[i*d:(i+1)*d])
				maha += m * m
			}
			l := make([]float64, triLen(d))
			cholPacked(l, want, d)
			for a := range d {
				logDet += 2 * math.Log(l[a*(a+1)/2+a])
			}
			wantLL := -float64(n)/2*(float64(d)*math.Log(2*math.Pi)+logDet) - maha/2
			if !mixClose(res.LogLikelihood, wantLL, 1e-10) {
				t.Errorf("offset %g, %s: log-likelihood %v, closed form %v", offset, st, res.LogLikelihood, wantLL)
			}
			if res.ClassEntropy != 0 {
				t.Errorf("offset %g, %s: class entropy %v with one component", offset, st, res.ClassEntropy)
			}
		}
	}
}

// TestMixtureRowOrder checks that permuting the rows changes nothing but
// rounding for a fixed seed: the fits end in the same optimum and their
// ordered parameters agree.
func TestMixtureRowOrder(t *testing.T) {
	for _, c := range []struct {
		file string
		k    int
		cov  Covariance
	}{
		{"faithful.csv", 2, CovFull},
		{"iris.csv", 3, CovFull},
		{"iris.csv", 3, CovPooled},
	} {
		x, d := mixReadCSV(t, c.file)
		n := len(x) / d
		perm := rand.New(rand.NewPCG(13, 14)).Perm(n)
		y := make([]float64, len(x))
		for i, p := range perm {
			copy(y[i*d:(i+1)*d], x[p*d:(p+1)*d])
		}
		cfg := MixtureConfig{K: c.k, Covariance: c.cov, Seed: 3, Restarts: 6, Tol: 1e-12, MaxIter: 5000}
		a, b := mixFit(t, x, d, cfg), mixFit(t, y, d, cfg)
		name := c.file + "/" + string(c.cov)
		if !mixClose(a.LogLikelihood, b.LogLikelihood, 1e-9) {
			t.Errorf("%s: log-likelihood %v, permuted %v", name, a.LogLikelihood, b.LogLikelihood)
		}
		for _, p := range []struct {
			what string
			u, v []float64
		}{{"weights", a.Weights, b.Weights}, {"means", a.Means, b.Means}, {"covs", a.Covs, b.Covs}} {
			for i := range p.u {
				if !mixClose(p.u[i], p.v[i], 1e-5) {
					t.Errorf("%s: %s[%d] = %v, permuted %v", name, p.what, i, p.u[i], p.v[i])
				}
			}
		}
	}
}

// TestMixtureDeterminism checks bit-identical results for Workers 1, 2
// and 8 and for GOMAXPROCS 1 and 2 (Workers 0), on data of many chunks.
func TestMixtureDeterminism(t *testing.T) {
	x, _ := mixBlobs(6000, 3, 4, 17)
	for _, cov := range mixStructures {
		cfg := MixtureConfig{K: 4, Covariance: cov, Seed: 9, Restarts: 3, MaxIter: 30}
		var ref *MixtureResult
		run := func(label string, workers, procs int) {
			old := runtime.GOMAXPROCS(procs)
			defer runtime.GOMAXPROCS(old)
			src := NewDense(x, 3)
			src.ChunkRows = 500
			c := cfg
			c.Workers = workers
			res, err := Mixture(context.Background(), src, c)
			if err != nil {
				t.Fatal(err)
			}
			if ref == nil {
				ref = res
				return
			}
			same := ref.LogLikelihood == res.LogLikelihood && ref.ClassEntropy == res.ClassEntropy &&
				ref.Iterations == res.Iterations && ref.Restart == res.Restart &&
				slices.Equal(ref.Weights, res.Weights) && slices.Equal(ref.Means, res.Means) &&
				slices.Equal(ref.Covs, res.Covs) && slices.Equal(ref.trace, res.trace)
			if !same {
				t.Errorf("%s, %s: result differs from Workers 1 (log-likelihood %v vs %v)", cov, label, res.LogLikelihood, ref.LogLikelihood)
			}
		}
		run("workers 1", 1, 2)
		run("workers 2", 2, 2)
		run("workers 8", 8, 2)
		run("GOMAXPROCS 1", 0, 1)
		run("GOMAXPROCS 2", 0, 2)
	}
}

// TestMixtureOrder checks the output order: descending weight, ties by
// the lexicographic order of the means.
func TestMixtureOrder(t *testing.T) {
	x, d := mixReadCSV(t, "iris.csv")
	res := mixFit(t, x, d, MixtureConfig{K: 4, Seed: 2})
	for k := 1; k < res.K; k++ {
		if res.Weights[k] > res.Weights[k-1] {
			t.Errorf("weights not descending: %v", res.Weights)
		}
	}
	var s float64
	for _, w := range res.Weights {
		s += w
	}
	if math.Abs(s-1) > 1e-12 {
		t.Errorf("weights sum to %v", s)
	}
	// Tied weights: the order follows the means, compared feature by
	// feature.
	m := newMixModel(3, 2, CovFull)
	copy(m.w, []float64{0.25, 0.375, 0.375})
	copy(m.mean, []float64{0, 0, 5, 1, 1, 2})
	for j := range 3 {
		copy(m.sigma[j*4:(j+1)*4], []float64{1, 0, 0, float64(j + 1)})
	}
	if err := m.factor(); err != nil {
		t.Fatal(err)
	}
	f := &mixFitter{data: &mixData{n: 10}}
	out := f.result(&mixRun{model: m}, 0, nil)
	if want := []float64{1, 2, 5, 1, 0, 0}; !slices.Equal(out.Means, want) {
		t.Errorf("means in order %v, want %v", out.Means, want)
	}
	if want := []float64{1, 0, 0, 3, 1, 0, 0, 2, 1, 0, 0, 1}; !slices.Equal(out.Covs, want) {
		t.Errorf("covariances in order %v, want %v", out.Covs, want)
	}
}

// TestMixtureUnscale fits Old Faithful once in its own units and once
// standardised (mean 0, population standard deviation 1), and checks that
// Unscale maps the second fit's parameters onto the first's and that the
// log-likelihoods differ by n Σ_j ln s_j (the Jacobian of the scaling).
// The floor is made negligible (Reg = 1e-12) because λ = Reg · v̄ is not
// scale-equivariant.
func TestMixtureUnscale(t *testing.T) {
	x, d := mixReadCSV(t, "faithful.csv")
	n := len(x) / d
	mean := make([]float64, d)
	cov := make([]float64, d*d)
	weightedScatter(mean, cov, x, d, nil)
	spread := make([]float64, d)
	var logJ float64
	for a := range d {
		spread[a] = math.Sqrt(cov[a*d+a])
		logJ += math.Log(spread[a])
	}
	z := make([]float64, len(x))
	for i := range x {
		z[i] = (x[i] - mean[i%d]) / spread[i%d]
	}
	cfg := MixtureConfig{K: 2, Reg: 1e-12, Seed: 1, Restarts: 4, Tol: 1e-13, MaxIter: 5000}
	raw, scaled := mixFit(t, x, d, cfg), mixFit(t, z, d, cfg)
	means, covs := scaled.Unscale(mean, spread)
	for i := range means {
		if !mixClose(means[i], raw.Means[i], 1e-7) {
			t.Errorf("mean[%d]: unscaled %v, raw fit %v", i, means[i], raw.Means[i])
		}
	}
	for i := range covs {
		if !mixClose(covs[i], raw.Covs[i], 1e-6) {
			t.Errorf("cov[%d]: unscaled %v, raw fit %v", i, covs[i], raw.Covs[i])
		}
	}
	if got := scaled.LogLikelihood - float64(n)*logJ; !mixClose(got, raw.LogLikelihood, 1e-9) {
		t.Errorf("scaled log-likelihood − n Σ ln s = %v, raw %v", got, raw.LogLikelihood)
	}
	// By hand: mean 1 → 1·2 + 10 = 12, variance 1 → 2·1·2 = 4, covariance
	// 0.5 between features of spreads 2 and 3 → 3.
	r := &MixtureResult{K: 1, D: 2, Means: []float64{1, -1}, Covs: []float64{1, 0.5, 0.5, 2}}
	m, c := r.Unscale([]float64{10, 20}, []float64{2, 3})
	if want := []float64{12, 17}; !slices.Equal(m, want) {
		t.Errorf("means %v, want %v", m, want)
	}
	if want := []float64{4, 3, 3, 18}; !slices.Equal(c, want) {
		t.Errorf("covariances %v, want %v", c, want)
	}
}

// TestMixtureStop checks how a restart's stop is reported: the iteration
// limit leaves Converged false, the tolerance sets it.
func TestMixtureStop(t *testing.T) {
	x, d := mixReadCSV(t, "iris.csv")
	for _, c := range []struct {
		name      string
		cfg       MixtureConfig
		converged bool
		stop      string
		iters     int
	}{
		{"limit", MixtureConfig{K: 3, Restarts: 1, MaxIter: 2, Tol: 1e-15}, false, "iteration limit", 2},
		{"tolerance", MixtureConfig{K: 3, Restarts: 1, Tol: 1e-3}, true, "log-likelihood change below tolerance", -1},
	} {
		res := mixFit(t, x, d, c.cfg)
		if res.Converged != c.converged || res.Stop != c.stop {
			t.Errorf("%s: converged %v, stop %q; want %v, %q", c.name, res.Converged, res.Stop, c.converged, c.stop)
		}
		if c.iters >= 0 && res.Iterations != c.iters {
			t.Errorf("%s: %d iterations, want %d", c.name, res.Iterations, c.iters)
		}
		if n := len(res.trace); c.converged && math.Abs(res.trace[n-1]-res.trace[n-2]) >= c.cfg.Tol {
			t.Errorf("%s: last change %v not below Tol", c.name, res.trace[n-1]-res.trace[n-2])
		}
	}
}

// TestRestoreMixture checks that a mixture rebuilt from its reported
// parameters scores every row bit for bit as the fitted one, and that
// damaged parameters are refused.
func TestRestoreMixture(t *testing.T) {
	x, d := mixReadCSV(t, "iris.csv")
	n := len(x) / d
	for _, cov := range mixStructures {
		res := mixFit(t, x, d, MixtureConfig{K: 3, Covariance: cov, Seed: 1})
		back, err := RestoreMixture(cov, d, res.Weights, res.Means, res.Covs)
		if err != nil {
			t.Fatalf("%s: %v", cov, err)
		}
		if back.Params != res.Params || back.K != 3 || back.D != d {
			t.Errorf("%s: restored K %d, D %d, %d parameters", cov, back.K, back.D, back.Params)
		}
		t1, t2 := make([]float64, 3), make([]float64, 3)
		for i := range n {
			row := x[i*d : (i+1)*d]
			l1, p1, ld1, m1 := res.Posterior(t1, row)
			l2, p2, ld2, m2 := back.Posterior(t2, row)
			if l1 != l2 || p1 != p2 || ld1 != ld2 || m1 != m2 || !slices.Equal(t1, t2) {
				t.Fatalf("%s: row %d scores differently after restoring", cov, i)
			}
		}
	}
	w := []float64{0.5, 0.5}
	mu := []float64{0, 0, 1, 1}
	full := []float64{1, 0.5, 0.5, 2, 2, 0, 0, 1}
	diag := []float64{1, 0, 0, 2, 2, 0, 0, 1}
	for _, c := range []struct {
		name         string
		cov          Covariance
		w, mu, sigma []float64
		want         string
	}{
		{"structure", "banded", w, mu, full, `unknown covariance structure "banded"`},
		{"lengths", CovFull, w, mu[:3], full, "need 4 mean and 8 covariance values, have 3 and 8"},
		{"weight", CovFull, []float64{1.5, -0.5}, mu, full, "component 2: weight -0.5"},
		{"weight sum", CovFull, []float64{0.5, 0.4}, mu, full, "weights sum to 0.9"},
		{"mean", CovFull, w, []float64{0, math.NaN(), 1, 1}, full, "component 1: mean of feature 2 is NaN"},
		{"symmetry", CovFull, w, mu, []float64{1, 0.5, 0.4, 2, 2, 0, 0, 1}, "component 1: covariance matrix is not symmetric"},
		{"not diagonal", CovDiag, w, mu, full, "component 1: diag covariance with off-diagonal entry (1, 2) = 0.5"},
		{"not spherical", CovSpherical, w, mu, diag, "component 1: spherical covariance with unequal variances"},
		{"not pooled", CovPooled, w, mu, full, "component 2: pooled covariance differs from component 1's"},
		{"not positive definite", CovFull, w, mu, []float64{1, 2, 2, 1, 1, 0, 0, 1}, "component 1: covariance matrix is not positive definite"},
	} {
		_, err := RestoreMixture(c.cov, 2, c.w, c.mu, c.sigma)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want %q", c.name, err, c.want)
		}
	}
}
