package fit

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// TestMixtureErrors checks the errors that settings and data can cause.
func TestMixtureErrors(t *testing.T) {
	iris, d := mixReadCSV(t, "iris.csv")
	same := make([]float64, 0, 40)
	for range 20 {
		same = append(same, 1.5, -2)
	}
	three := make([]float64, 0, 60)
	for i := range 30 {
		three = append(three, float64(i%3), float64(i%3)*2)
	}
	withNaN := append([]float64(nil), iris...)
	withNaN[7*d+2] = math.NaN()
	withInf := append([]float64(nil), iris...)
	withInf[3] = math.Inf(1)
	cases := []struct {
		name string
		x    []float64
		d    int
		cfg  MixtureConfig
		want string
	}{
		{"K zero", iris, d, MixtureConfig{}, "K = 0"},
		{"K above rows", iris[:3*d], d, MixtureConfig{K: 4}, "K = 4 exceeds the 3 rows"},
		{"negative Reg", iris, d, MixtureConfig{K: 2, Reg: -1}, "Reg = -1"},
		{"NaN Reg", iris, d, MixtureConfig{K: 2, Reg: math.NaN()}, "Reg = NaN"},
		{"unknown structure", iris, d, MixtureConfig{K: 2, Covariance: "banded"}, `unknown covariance structure "banded"`},
		{"unknown start", iris, d, MixtureConfig{K: 2, Init: "farthest"}, `unknown start "farthest"`},
		{"negative restarts", iris, d, MixtureConfig{K: 2, Restarts: -1}, "negative setting"},
		{"no rows", []float64{}, 2, MixtureConfig{K: 1}, "no rows"},
		{"identical rows", same, 2, MixtureConfig{K: 2}, "all 20 rows are identical"},
		{"identical rows, one component", same, 2, MixtureConfig{K: 1}, "all 20 rows are identical"},
		{"few distinct rows", three, 2, MixtureConfig{K: 4, Covariance: CovSpherical}, "only 3 distinct rows for K = 4"},
		// 4 full components in 4 features need 5 rows' worth each.
		{"too few rows", iris[:18*d], d, MixtureConfig{K: 4}, "4 full components in 4 features need at least 20 rows (5 each), have 18"},
		{"NaN value", withNaN, d, MixtureConfig{K: 2}, "row 7, feature 2: value NaN is not finite"},
		{"infinite value", withInf, d, MixtureConfig{K: 2}, "row 0, feature 3: value +Inf is not finite"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			res, err := Mixture(context.Background(), NewDense(c.x, c.d), c.cfg)
			if err == nil {
				t.Fatalf("no error; log-likelihood %v", res.LogLikelihood)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %q, want it to contain %q", err, c.want)
			}
		})
	}
}

// TestMixtureCancel checks that a cancelled context stops the fit with
// the context's error.
func TestMixtureCancel(t *testing.T) {
	x, d := mixReadCSV(t, "iris.csv")
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := Mixture(ctx, NewDense(x, d), MixtureConfig{K: 3})
	if !errors.Is(err, context.Canceled) {
		t.Errorf("error %v, want context.Canceled", err)
	}
}

// TestMixtureDuplicates fits Old Faithful, whose eruption times are
// heavily rounded so that many rows share values, with more components
// than it has clusters: whatever the restarts run into, the reported
// solution must obey the spurious rule.
func TestMixtureDuplicates(t *testing.T) {
	x, d := mixReadCSV(t, "faithful.csv")
	for _, cov := range mixStructures {
		for _, k := range []int{5, 8} {
			res, err := Mixture(context.Background(), NewDense(x, d), MixtureConfig{K: k, Covariance: cov, Seed: 4, Restarts: 6})
			if err != nil {
				if !strings.Contains(err.Error(), "set aside") {
					t.Errorf("%s K=%d: %v", cov, k, err)
				}
				continue
			}
			mixCheckNotSpurious(t, res, x)
		}
	}
}

// mixCheckNotSpurious checks the reported solution against the rule of
// mixFitter.spurious, recomputing memberships with Posterior and ρ_k with
// the data's covariance.
func mixCheckNotSpurious(t *testing.T, res *MixtureResult, x []float64) {
	t.Helper()
	d := res.D
	n := len(x) / d
	nk := make([]float64, res.K)
	tau := make([]float64, res.K)
	for i := range n {
		res.Posterior(tau, x[i*d:(i+1)*d])
		for k, v := range tau {
			nk[k] += v
		}
	}
	need := float64(mixMinRows(res.Covariance, d))
	mean := make([]float64, d)
	cov := make([]float64, d*d)
	weightedScatter(mean, cov, x, d, nil)
	for a := range d {
		cov[a*d+a] += res.Floor
	}
	l := make([]float64, triLen(d))
	cholPacked(l, cov, d)
	for k := range res.K {
		if nk[k] < need {
			t.Errorf("%s K=%d: component %d holds %.3g rows' worth, needs %g", res.Covariance, res.K, k+1, nk[k], need)
		}
		if rho := minGenEigen(make([]float64, d*d), res.Covs[k*d*d:(k+1)*d*d], l, d); rho < spuriousRatio {
			t.Errorf("%s K=%d: component %d has ρ = %.3g", res.Covariance, res.K, k+1, rho)
		}
	}
}

// TestMixtureSpurious builds data whose natural fit is degenerate and
// checks that such solutions are set aside, counted and explained, and
// never reported.
func TestMixtureSpurious(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 32))
	// 200 rows from N(0, I₂) and 12 copies of the point (9, 9): a
	// component on the copies has no spread at all.
	dup := make([]float64, 0, 424)
	for range 200 {
		dup = append(dup, rng.NormFloat64(), rng.NormFloat64())
	}
	for range 12 {
		dup = append(dup, 9, 9)
	}
	// 300 rows from N(0, I₁₀) and 6 rows from N(20·1, I₁₀): a full
	// component on the 6 rows has fewer than d + 1 = 11 of them.
	few := make([]float64, 0, 3060)
	for i := range 306 {
		c := 0.0
		if i >= 300 {
			c = 20
		}
		for range 10 {
			few = append(few, c+rng.NormFloat64())
		}
	}
	for _, c := range []struct {
		name string
		x    []float64
		d, k int
		why  string
	}{
		{"duplicates", dup, 2, 2, "times the data's variance"},
		{"fewer rows than features", few, 10, 2, "rows' worth of membership"},
	} {
		t.Run(c.name, func(t *testing.T) {
			res, err := Mixture(context.Background(), NewDense(c.x, c.d), MixtureConfig{K: c.k, Seed: 5, Restarts: 4})
			if err != nil {
				if !strings.Contains(err.Error(), "all 4 restarts were set aside") || !strings.Contains(err.Error(), c.why) {
					t.Errorf("error %q, want every restart set aside for %q", err, c.why)
				}
				return
			}
			if res.Spurious == 0 {
				t.Errorf("no restart set aside; weights %v", res.Weights)
			}
			found := false
			for _, e := range res.Events {
				found = found || strings.Contains(e, "spurious") && strings.Contains(e, c.why)
			}
			if !found {
				t.Errorf("no event explains a spurious restart (%q): %q", c.why, res.Events)
			}
			mixCheckNotSpurious(t, res, c.x)
		})
	}
}

// TestMixtureReseed starts EM with one component far from every row, so
// that it holds no membership after the first pass, and checks that it is
// re-seeded at the row of lowest density, recorded, and that EM goes on
// to a solution that uses it.
func TestMixtureReseed(t *testing.T) {
	x, d := mixReadCSV(t, "faithful.csv")
	src := NewDense(x, d)
	ctx := context.Background()
	for _, cov := range mixStructures {
		s, err := MixtureConfig{K: 2, Covariance: cov, Restarts: 1}.settings()
		if err != nil {
			t.Fatal(err)
		}
		data, err := scanMixData(ctx, src, 1, s.Reg)
		if err != nil {
			t.Fatal(err)
		}
		f := newMixFitter(src, s, data)
		m := newMixModel(2, d, cov)
		copy(m.mean, []float64{3.5, 70, 1e4, 1e4})
		m.w[0], m.w[1] = 0.5, 0.5
		copy(m.sigma, f.structured)
		copy(m.sigma[d*d:], f.structured)
		if err := m.factor(); err != nil {
			t.Fatal(err)
		}
		run := &mixRun{}
		if err := f.em(ctx, run, m); err != nil {
			t.Fatalf("%s: %v", cov, err)
		}
		if len(run.reseeded) != 1 || run.reseeded[0] != 0 || len(run.events) != 1 ||
			!strings.Contains(run.events[0], "iteration 1: a component lost its weight") {
			t.Fatalf("%s: re-seeds after passes %v, events %q", cov, run.reseeded, run.events)
		}
		if why := f.spurious(run); why != "" {
			t.Errorf("%s: solution after re-seeding is spurious: %s", cov, why)
		}
		for k, nk := range run.nk {
			if nk < 20 {
				t.Errorf("%s: component %d holds %.3g rows after re-seeding", cov, k, nk)
			}
		}
	}
}
