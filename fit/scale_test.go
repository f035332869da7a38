package fit

import (
	"context"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

func TestFitScalingHandChecked(t *testing.T) {
	tests := []struct {
		name     string
		method   string
		x        []float64 // one feature per row unless d says otherwise
		d        int
		center   []float64
		spread   []float64
		constant []int
	}{
		{
			// Mean 2.5, population variance (2.25+0.25+0.25+2.25)/4 = 1.25;
			// the second feature is constant: centre 7, spread 1.
			name: "standard", method: "standard",
			x: []float64{1, 7, 2, 7, 3, 7, 4, 7}, d: 2,
			center: []float64{2.5, 7}, spread: []float64{math.Sqrt(1.25), 1}, constant: []int{1},
		},
		{
			// The same spread far from the origin, where Σx² − n·x̄² would
			// lose every digit.
			name: "standard far from zero", method: "standard",
			x: []float64{1e9 + 1, 1e9 + 2, 1e9 + 3, 1e9 + 4}, d: 1,
			center: []float64{1e9 + 2.5}, spread: []float64{math.Sqrt(1.25)},
		},
		{
			// Sorted 1 2 3 4 100: median x(2) = 3; Q1 at h = 1 is 2, Q3 at
			// h = 3 is 4; IQR 2.
			name: "robust odd", method: "robust",
			x: []float64{100, 2, 4, 1, 3}, d: 1,
			center: []float64{3}, spread: []float64{2},
		},
		{
			// Sorted 1 2 3 4: Q1 at h = 0.75 is 1.75, median at 1.5 is 2.5,
			// Q3 at 2.25 is 3.25; IQR 1.5.
			name: "robust even", method: "robust",
			x: []float64{4, 1, 3, 2}, d: 1,
			center: []float64{2.5}, spread: []float64{1.5},
		},
		{
			// Sorted 1 5 5 5 5 9: Q1 (h = 1.25) and Q3 (h = 3.75) are both 5.
			name: "robust zero IQR", method: "robust",
			x: []float64{5, 9, 5, 1, 5, 5}, d: 1,
			center: []float64{5}, spread: []float64{1}, constant: []int{0},
		},
		{
			name: "none", method: "none",
			x: []float64{1, 2, 3, 4, 5, 6}, d: 3,
			center: []float64{0, 0, 0}, spread: []float64{1, 1, 1},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			// One row per chunk, so that every merge is exercised.
			src := &Dense{N: len(tt.x) / tt.d, D: tt.d, X: tt.x, ChunkRows: 1}
			orig := slices.Clone(tt.x)
			s, constant, err := FitScaling(context.Background(), src, tt.method)
			if err != nil {
				t.Fatal(err)
			}
			if s.Method != tt.method || !slices.Equal(constant, tt.constant) {
				t.Errorf("method %q constant %v, want %q %v", s.Method, constant, tt.method, tt.constant)
			}
			for j := range tt.d {
				if math.Abs(s.Center[j]-tt.center[j]) > 1e-12*math.Abs(tt.center[j]) || math.Abs(s.Spread[j]-tt.spread[j]) > 1e-12 {
					t.Errorf("feature %d: centre %v spread %v, want %v %v", j, s.Center[j], s.Spread[j], tt.center[j], tt.spread[j])
				}
			}
			if !slices.Equal(tt.x, orig) {
				t.Error("input modified")
			}
		})
	}
}

// TestFitScalingIris checks both scalings against scikit-learn 1.2.1's
// StandardScaler (mean_, scale_) and RobustScaler (center_, scale_) on the
// raw iris features (testdata/iris_kmeans_reference.txt).
func TestFitScalingIris(t *testing.T) {
	ref := kmReference(t)
	iris := kmIris(t)
	iris.ChunkRows = 16
	for _, method := range []string{"standard", "robust"} {
		t.Run(method, func(t *testing.T) {
			s, constant, err := FitScaling(context.Background(), iris, method)
			if err != nil {
				t.Fatal(err)
			}
			if constant != nil {
				t.Errorf("constant features %v", constant)
			}
			wc, ws := ref[method+"_center"][0], ref[method+"_spread"][0]
			for j := range 4 {
				// The reference prints 15 significant digits.
				if math.Abs(s.Center[j]-wc[j]) > 1e-14*math.Abs(wc[j]) || math.Abs(s.Spread[j]-ws[j]) > 1e-14*ws[j] {
					t.Errorf("feature %d: centre %.17g spread %.17g, want %.15g %.15g (scikit-learn 1.2.1)", j, s.Center[j], s.Spread[j], wc[j], ws[j])
				}
			}
		})
	}
}

func TestScalingApplyInvert(t *testing.T) {
	rng := rand.New(rand.NewPCG(2, 2))
	x := kmRandRows(rng, 500, 3)
	for i := range x {
		x[i] = x[i]*1e3 + 5e4
	}
	s, _, err := FitScaling(context.Background(), NewDense(x, 3), "standard")
	if err != nil {
		t.Fatal(err)
	}
	z := make([]float64, len(x))
	s.Apply(z, x)
	for i, v := range z {
		if want := (x[i] - s.Center[i%3]) / s.Spread[i%3]; v != want {
			t.Fatalf("Apply[%d] = %v, want %v", i, v, want)
		}
	}
	// Scaled features have mean 0 and population variance 1.
	spreads, err := Spreads(context.Background(), NewDense(z, 3), 1)
	if err != nil {
		t.Fatal(err)
	}
	for j, v := range spreads {
		if math.Abs(v-1) > 1e-12 {
			t.Errorf("scaled feature %d has spread %v", j, v)
		}
	}
	back := slices.Clone(z)
	s.Invert(back, back) // in place
	for i, v := range back {
		if math.Abs(v-x[i]) > 4*math.Abs(x[i])*0x1p-52 {
			t.Fatalf("Invert(Apply(x))[%d] = %v, want %v", i, v, x[i])
		}
	}
	in := slices.Clone(x)
	s.Apply(in, in)
	if !slices.Equal(in, z) {
		t.Error("Apply in place differs from Apply into another slice")
	}
}

func TestScalingPanicsOnShape(t *testing.T) {
	s := Scaling{Method: "none", Center: []float64{0, 0}, Spread: []float64{1, 1}}
	tests := []struct {
		name string
		f    func()
	}{
		{"ragged rows", func() { s.Apply(make([]float64, 3), make([]float64, 3)) }},
		{"dst shorter", func() { s.Invert(make([]float64, 2), make([]float64, 4)) }},
		{"spreads missing", func() { Scaling{Center: []float64{0}}.Apply(nil, nil) }},
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

func TestSpreads(t *testing.T) {
	rng := rand.New(rand.NewPCG(6, 1))
	const n, d = 10_007, 3
	x := kmRandRows(rng, n, d)
	for i := range n {
		x[i*d+2] = -3.5 // constant feature
	}
	var ref []float64
	for _, workers := range []int{1, 2, 8} {
		got, err := Spreads(context.Background(), &Dense{N: n, D: d, X: x, ChunkRows: 500}, workers)
		if err != nil {
			t.Fatal(err)
		}
		if ref == nil {
			ref = got
		} else if !slices.Equal(got, ref) {
			t.Errorf("workers %d: %v, workers 1: %v", workers, got, ref)
		}
	}
	// Direct two-pass computation.
	for j := range d {
		var mean, ss float64
		for i := range n {
			mean += x[i*d+j]
		}
		mean /= n
		for i := range n {
			ss += (x[i*d+j] - mean) * (x[i*d+j] - mean)
		}
		if want := math.Sqrt(ss / n); math.Abs(ref[j]-want) > 1e-13*want || (want == 0) != (ref[j] == 0) {
			t.Errorf("feature %d: spread %v, direct %v", j, ref[j], want)
		}
	}
}

func TestFitScalingErrors(t *testing.T) {
	tests := []struct {
		name   string
		src    Source
		method string
		words  []string
	}{
		{"unknown method", NewDense([]float64{1, 2}, 1), "minmax", []string{`"minmax"`, "standard"}},
		{"empty method", NewDense([]float64{1, 2}, 1), "", []string{`""`}},
		{"no rows", NewDense(nil, 2), "standard", []string{"no rows"}},
		{"robust no rows", NewDense(nil, 2), "robust", []string{"no rows"}},
		{"infinite value", NewDense([]float64{1, 2, 3, 4, math.Inf(1), 6}, 2), "robust", []string{"row 2, feature 0", "+Inf"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, _, err := FitScaling(context.Background(), tt.src, tt.method)
			if err == nil {
				t.Fatal("no error")
			}
			for _, w := range tt.words {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q does not say %q", err, w)
				}
			}
		})
	}
}

// kmQuantileSorted is the type 7 quantile of sorted values.
func kmQuantileSorted(sorted []float64, p float64) float64 {
	h := float64(len(sorted)-1) * p
	k := int(math.Floor(h))
	if t := h - float64(k); t > 0 && k+1 < len(sorted) {
		return sorted[k] + t*(sorted[k+1]-sorted[k])
	}
	return sorted[k]
}

func TestQuantilesBySelection(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	shapes := map[string]func(i, n int) float64{
		"random":        func(i, n int) float64 { return rng.NormFloat64() },
		"few values":    func(i, n int) float64 { return float64(rng.IntN(3)) },
		"sorted":        func(i, n int) float64 { return float64(i) },
		"reversed":      func(i, n int) float64 { return float64(n - i) },
		"all equal":     func(i, n int) float64 { return 4 },
		"organ pipe":    func(i, n int) float64 { return float64(min(i, n-i)) },
		"sawtooth of 7": func(i, n int) float64 { return float64(i % 7) },
	}
	ps := []float64{0, 0.1, 0.25, 0.5, 0.5, 0.75, 0.999, 1}
	for name, gen := range shapes {
		for _, n := range []int{1, 2, 3, 10, 101, 1000, 4097} {
			x := make([]float64, n)
			for i := range x {
				x[i] = gen(i, n)
			}
			sorted := slices.Clone(x)
			slices.Sort(sorted)
			got := quantilesInPlace(x, ps...)
			for q, p := range ps {
				if want := kmQuantileSorted(sorted, p); got[q] != want {
					t.Errorf("%s n=%d: quantile %v = %v, want %v", name, n, p, got[q], want)
				}
			}
			slices.Sort(x)
			if !slices.Equal(x, sorted) {
				t.Errorf("%s n=%d: values lost or changed", name, n)
			}
		}
	}
}
