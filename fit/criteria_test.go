package fit

import (
	"fmt"
	"math"
	"strings"
	"testing"
)

func TestKMeansBICHand(t *testing.T) {
	// Hand computations from the formulas on KMeansBIC; the decimal values
	// were evaluated with a calculator (Python's math module as one).
	tests := []struct {
		name    string
		n, d    int
		sizes   []int64
		inertia float64
		logL    float64
		p       int
		bic     float64
	}{
		// d = 2. Cluster 0: (0,0), (2,0), (0,2), (2,2) around (1,1), each
		// 2 away in squared distance: W₀ = 8. Cluster 1: (10,10), (12,10)
		// around (11,10): W₁ = 2. W = 10, n = 6, k = 2.
		//   σ̂² = W/(d(n−k)) = 10/(2·4) = 1.25
		//   Σ n_j ln(n_j/n) = 4 ln(4/6) + 2 ln(2/6)
		//                   = −1.6218604324326578 − 2.1972245773362196
		//   (n d/2) ln(2π σ̂²) = 6 ln(7.853981633974483) = 12.36612370634133
		//   d(n−k)/2 = 4
		//   log L = −3.8190850097688774 − 12.36612370634133 − 4
		//         = −20.185208716110207
		//   p = k(d+1) = 6, p ln n = 6 ln 6 = 10.75055681536833
		//   BIC = 40.370417432220414 + 10.75055681536833 = 51.12097424758875
		{"two clusters in the plane", 6, 2, []int64{4, 2}, 10, -20.185208716110207, 6, 51.12097424758875},
		// d = 1. Cluster 0: 0, 2 around 1 (W₀ = 2); cluster 1: 10 alone.
		// n = 3, k = 2: σ̂² = 2/(1·1) = 2,
		//   log L = 2 ln(2/3) + ln(1/3) − (3/2) ln(4π) − 1/2
		//         = −6.206078875338375
		//   p = 2·2 = 4, BIC = 12.41215775067675 + 4 ln 3 = 16.806606905349188
		{"three points on a line", 3, 1, []int64{2, 1}, 2, -6.206078875338375, 4, 16.806606905349188},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			logL, p, bic := KMeansBIC(tc.n, tc.d, tc.sizes, tc.inertia)
			if p != tc.p {
				t.Errorf("p = %d, want %d", p, tc.p)
			}
			if math.Abs(logL-tc.logL) > 1e-12 {
				t.Errorf("logL = %.17g, want %.17g", logL, tc.logL)
			}
			if math.Abs(bic-tc.bic) > 1e-12 {
				t.Errorf("BIC = %.17g, want %.17g", bic, tc.bic)
			}
		})
	}
}

func TestKMeansBICDirectLikelihood(t *testing.T) {
	// Second route: sum the log density of each row under the hard-assigned
	// spherical model, ln(n_j/n) + ln N(x; μ_j, σ̂² I), with σ̂² from the
	// data. Must equal KMeansBIC's closed form.
	x := [][]float64{{0, 1, 2}, {1, 1, 3}, {0, 2, 2}, {5, 5, 5}, {6, 5, 4}, {9, 0, 1}, {8, 1, 0}, {9, 1, 1}}
	label := []int{0, 0, 0, 1, 1, 2, 2, 2}
	const k, d = 3, 3
	n := len(x)
	mu := make([][]float64, k)
	sizes := make([]int64, k)
	for j := range mu {
		mu[j] = make([]float64, d)
	}
	for i, row := range x {
		sizes[label[i]]++
		for f, v := range row {
			mu[label[i]][f] += v
		}
	}
	for j := range mu {
		for f := range mu[j] {
			mu[j][f] /= float64(sizes[j])
		}
	}
	var w float64
	for i, row := range x {
		for f, v := range row {
			w += (v - mu[label[i]][f]) * (v - mu[label[i]][f])
		}
	}
	sigma2 := w / float64(d*(n-k))
	var direct float64
	for i, row := range x {
		var r2 float64
		for f, v := range row {
			r2 += (v - mu[label[i]][f]) * (v - mu[label[i]][f])
		}
		direct += math.Log(float64(sizes[label[i]])/float64(n)) -
			float64(d)/2*math.Log(2*math.Pi*sigma2) - r2/(2*sigma2)
	}
	logL, p, bic := KMeansBIC(n, d, sizes, w)
	if math.Abs(logL-direct) > 1e-12*math.Abs(direct) {
		t.Errorf("logL = %.17g, direct sum %.17g", logL, direct)
	}
	if want := -2*direct + float64(k*(d+1))*math.Log(float64(n)); math.Abs(bic-want) > 1e-12*math.Abs(want) || p != k*(d+1) {
		t.Errorf("BIC = %.17g (p = %d), want %.17g (p = %d)", bic, p, want, k*(d+1))
	}
}

func TestKMeansBICDegenerate(t *testing.T) {
	// W = 0 or n ≤ k: unbounded likelihood, reported as +Inf / −Inf.
	tests := []struct {
		name    string
		n       int
		sizes   []int64
		inertia float64
	}{
		{"zero inertia", 4, []int64{2, 2}, 0},
		{"one row per cluster", 3, []int64{1, 1, 1}, 0},
		{"fewer rows than clusters", 2, []int64{1, 1, 0}, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			logL, _, bic := KMeansBIC(tc.n, 2, tc.sizes, tc.inertia)
			if !math.IsInf(logL, 1) || !math.IsInf(bic, -1) {
				t.Errorf("KMeansBIC = %v, %v; want +Inf, -Inf", logL, bic)
			}
		})
	}
}

func TestKMeansBICEmptyCluster(t *testing.T) {
	// An empty cluster adds nothing to Σ n_j ln(n_j/n) (0 ln 0 = 0) but
	// still counts its d+1 parameters.
	l3, p3, _ := KMeansBIC(6, 2, []int64{4, 2, 0}, 10)
	l2, p2, _ := KMeansBIC(6, 2, []int64{4, 2}, 10)
	if p3 != p2+3 {
		t.Errorf("p = %d with an empty cluster, %d without; want 3 more", p3, p2)
	}
	// Only the variance estimate changes: σ̂² = 10/(2·3) instead of
	// 10/(2·4), and d(n−k)/2 = 3 instead of 4.
	want := l2 + 6*math.Log(10.0/8) - 6*math.Log(10.0/6) + 1
	if math.Abs(l3-want) > 1e-12 {
		t.Errorf("logL with an empty cluster = %.17g, want %.17g", l3, want)
	}
}

func TestKMeansBICPanics(t *testing.T) {
	tests := []struct {
		name    string
		n, d    int
		sizes   []int64
		inertia float64
		want    string
	}{
		{"no clusters", 3, 1, nil, 1, "fit: k-means BIC of n=3 rows, d=1 features, k=0 clusters"},
		{"sizes", 5, 1, []int64{2, 2}, 1, "fit: k-means BIC: sizes sum to 4, want n = 5"},
		{"negative size", 1, 1, []int64{2, -1}, 1, "fit: k-means BIC: cluster 1 has size -1"},
		{"NaN inertia", 4, 1, []int64{2, 2}, math.NaN(), "fit: k-means BIC with inertia NaN"},
		{"negative inertia", 4, 1, []int64{2, 2}, -1, "fit: k-means BIC with inertia -1"},
		{"d zero", 4, 0, []int64{2, 2}, 1, "fit: k-means BIC of n=4 rows, d=0"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				got := fmt.Sprint(recover())
				if !strings.HasPrefix(got, tc.want) {
					t.Errorf("panic %q, want prefix %q", got, tc.want)
				}
			}()
			KMeansBIC(tc.n, tc.d, tc.sizes, tc.inertia)
		})
	}
}

func TestICL(t *testing.T) {
	// ICL = BIC + 2E (Biernacki, Celeux & Govaert 2000, in the −2 log L
	// convention).
	tests := []struct {
		name              string
		bic, entropy, icl float64
	}{
		{"hard partition", 51.25, 0, 51.25},
		{"fuzzy", 100, 3.5, 107},
		{"negative BIC", -20, 0.25, -19.5},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := ICL(tc.bic, tc.entropy); got != tc.icl {
				t.Errorf("ICL(%v, %v) = %v, want %v", tc.bic, tc.entropy, got, tc.icl)
			}
		})
	}
}
