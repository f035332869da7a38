package fit

import (
	"context"
	"fmt"
	"math/rand/v2"
	"syscall"
	"testing"
	"time"
)

// mixCPUTime is the user and system CPU time of the process so far.
func mixCPUTime() time.Duration {
	var u syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &u); err != nil {
		return 0
	}
	return time.Duration(u.Utime.Nano() + u.Stime.Nano())
}

// mixBlobs draws n rows of d features from a mixture of k Gaussian
// components with overlapping supports: means N(0, 4²I), covariances
// A Aᵀ/d + 0.1 I with A of standard normal entries, equal weights. It
// returns the rows and each row's component.
func mixBlobs(n, d, k int, seed uint64) ([]float64, []int) {
	rng := rand.New(rand.NewPCG(seed, 1))
	means := make([]float64, k*d)
	for i := range means {
		means[i] = 4 * rng.NormFloat64()
	}
	chols := make([][]float64, k)
	for j := range k {
		a := make([]float64, d*d)
		for i := range a {
			a[i] = rng.NormFloat64()
		}
		s := make([]float64, d*d)
		for p := range d {
			for q := range d {
				var v float64
				for r := range d {
					v += a[p*d+r] * a[q*d+r]
				}
				s[p*d+q] = v / float64(d)
			}
			s[p*d+p] += 0.1
		}
		chols[j] = make([]float64, triLen(d))
		if !cholPacked(chols[j], s, d) {
			panic("mixBlobs: not positive definite")
		}
	}
	x := make([]float64, n*d)
	lab := make([]int, n)
	z := make([]float64, d)
	for i := range n {
		j := rng.IntN(k)
		lab[i] = j
		for a := range z {
			z[a] = rng.NormFloat64()
		}
		for a := range d {
			v := means[j*d+a]
			for b := 0; b <= a; b++ {
				v += chols[j][a*(a+1)/2+b] * z[b]
			}
			x[i*d+a] = v
		}
	}
	return x, lab
}

// BenchmarkMixtureIteration times one EM iteration (the fused pass and the
// maximisation step) on n rows, d features and k components, full
// covariance unless named, with all cores.
func BenchmarkMixtureIteration(b *testing.B) {
	for _, c := range []struct {
		n, d, k int
		cov     Covariance
	}{
		{1_000_000, 8, 8, CovFull},
		{1_000_000, 8, 8, CovDiag},
		{1_000_000, 8, 8, CovPooled},
		{100_000, 2, 3, CovFull},
		{100_000, 32, 4, CovFull},
	} {
		b.Run(fmt.Sprintf("n=%d/d=%d/k=%d/%s", c.n, c.d, c.k, c.cov), func(b *testing.B) {
			x, _ := mixBlobs(c.n, c.d, c.k, 7)
			src := NewDense(x, c.d)
			ctx := context.Background()
			s, err := MixtureConfig{K: c.k, Covariance: c.cov}.settings()
			if err != nil {
				b.Fatal(err)
			}
			data, err := scanMixData(ctx, src, s.Workers, s.Reg)
			if err != nil {
				b.Fatal(err)
			}
			f := newMixFitter(src, s, data)
			run := &mixRun{}
			cur, err := f.start(ctx, run, InitRandom, rand.New(rand.NewPCG(1, 2)))
			if err != nil {
				b.Fatal(err)
			}
			next := newMixModel(c.k, c.d, c.cov)
			cpu0 := mixCPUTime()
			b.ResetTimer()
			for b.Loop() {
				st, err := f.pass.run(ctx, cur)
				if err != nil {
					b.Fatal(err)
				}
				next.copyFrom(cur)
				cur.unwhiten(st)
				f.empty = next.mStep(st, cur.mean, data.floor, f.empty)
				if len(f.empty) > 0 {
					if err := f.reseed(run, next, st, f.empty, 1); err != nil {
						b.Fatal(err)
					}
				}
				if err := next.factor(); err != nil {
					b.Fatal(err)
				}
				cur, next = next, cur
			}
			cpu := (mixCPUTime() - cpu0).Seconds() / float64(b.N)
			sec := b.Elapsed().Seconds() / float64(b.N)
			b.ReportMetric(float64(c.n)/sec, "rows/s")
			b.ReportMetric(sec*1e3, "ms/iter")
			// CPU time of the process per iteration, all threads: on a
			// shared machine the wall time above depends on other load.
			b.ReportMetric(cpu*1e3, "cpu-ms/iter")
		})
	}
}

// BenchmarkMixtureEStep times the fused pass over one chunk of 4096 rows
// on one goroutine (d = 8, k = 8), reporting nanoseconds per row.
func BenchmarkMixtureEStep(b *testing.B) {
	for _, cov := range []Covariance{CovFull, CovDiag} {
		b.Run(string(cov), func(b *testing.B) {
			const n, d, k = 4096, 8, 8
			x, _ := mixBlobs(n, d, k, 7)
			src := NewDense(x, d)
			ctx := context.Background()
			s, err := MixtureConfig{K: k, Covariance: cov, Workers: 1}.settings()
			if err != nil {
				b.Fatal(err)
			}
			data, err := scanMixData(ctx, src, 1, s.Reg)
			if err != nil {
				b.Fatal(err)
			}
			f := newMixFitter(src, s, data)
			m, err := f.start(ctx, &mixRun{}, InitRandom, rand.New(rand.NewPCG(1, 2)))
			if err != nil {
				b.Fatal(err)
			}
			st := newMixStats(k, d, m.sumLen())
			sc := newMixScratch(k, d)
			for b.Loop() {
				st.reset()
				m.eChunk(st, sc, x, 0)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*n), "ns/row")
		})
	}
}

// BenchmarkMixture times whole fits with the default settings (4 restarts
// of mixed kinds, Tol 1e-6, full covariance) on invented data.
func BenchmarkMixture(b *testing.B) {
	for _, c := range []struct{ n, d, k int }{
		{20_000, 2, 3},
		{100_000, 4, 4},
	} {
		b.Run(fmt.Sprintf("n=%d/d=%d/k=%d", c.n, c.d, c.k), func(b *testing.B) {
			x, _ := mixBlobs(c.n, c.d, c.k, 3)
			src := NewDense(x, c.d)
			var iters int
			for b.Loop() {
				res, err := Mixture(context.Background(), src, MixtureConfig{K: c.k, Seed: 1})
				if err != nil {
					b.Fatal(err)
				}
				iters = res.Iterations
			}
			b.ReportMetric(float64(iters), "iterations")
		})
	}
}
