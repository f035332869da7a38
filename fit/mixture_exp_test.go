package fit

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestExpNonPos compares expNonPos with math.Exp over the range the
// responsibilities use, at random points and at the edges.
func TestExpNonPos(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	xs := []float64{0, -0.0, -1e-300, -math.Ln2 / 64, -math.Ln2 / 32, -math.Ln2, -1, -10, -700, -708, -708.5, -745, -746, -1000, math.Inf(-1)}
	for range 200000 {
		xs = append(xs, -750*rng.Float64(), -rng.Float64(), -1e-3*rng.Float64())
	}
	var worst float64
	for _, x := range xs {
		got, want := expNonPos(x), math.Exp(x)
		if want == 0 || x < -708 {
			if got != want {
				t.Fatalf("expNonPos(%v) = %v, want %v", x, got, want)
			}
			continue
		}
		rel := math.Abs(got-want) / want
		worst = max(worst, rel)
	}
	// Two ulp of relative error is 4.4e-16 (common practice for an
	// elementary function with a tabulated range reduction).
	if worst > 4.5e-16 {
		t.Errorf("largest relative error %.3g, want ≤ 4.5e-16", worst)
	}
	if math.IsNaN(expNonPos(math.NaN())) == false {
		t.Errorf("expNonPos(NaN) is not NaN")
	}
}

// TestExpShifted checks the block form against math.Exp, the cut, and the
// running sums.
func TestExpShifted(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	const n = 1000
	src, shift := make([]float64, n), make([]float64, n)
	for i := range src {
		shift[i] = 50 * rng.NormFloat64()
		src[i] = shift[i] - 750*rng.Float64()
	}
	src[0], src[1], src[2] = shift[0], shift[1]-700, shift[2]-699.9
	dst, sum := make([]float64, n), make([]float64, n)
	for i := range sum {
		sum[i] = 1
	}
	expShifted(dst, sum, src, shift, -700)
	for i := range dst {
		x := src[i] - shift[i]
		want := math.Exp(x)
		if x <= -700 {
			want = 0
		}
		if want == 0 && dst[i] != 0 || want != 0 && math.Abs(dst[i]-want) > 4.5e-16*want {
			t.Errorf("x = %v: %v, want %v", x, dst[i], want)
		}
		if sum[i] != 1+dst[i] {
			t.Errorf("x = %v: sum %v, want %v", x, sum[i], 1+dst[i])
		}
	}
}

func BenchmarkExpNonPos(b *testing.B) {
	xs := make([]float64, 1024)
	rng := rand.New(rand.NewPCG(1, 1))
	for i := range xs {
		xs[i] = -30 * rng.Float64()
	}
	var s float64
	for b.Loop() {
		for _, x := range xs {
			s += expNonPos(x)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(xs)), "ns/exp")
	_ = s
}

func BenchmarkMathExp(b *testing.B) {
	xs := make([]float64, 1024)
	rng := rand.New(rand.NewPCG(1, 1))
	for i := range xs {
		xs[i] = -30 * rng.Float64()
	}
	var s float64
	for b.Loop() {
		for _, x := range xs {
			s += math.Exp(x)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(xs)), "ns/exp")
	_ = s
}
