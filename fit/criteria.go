package fit

import (
	"fmt"
	"math"
)

// KMeansBIC scores a k-means solution by the Bayesian information criterion
// (Schwarz 1978) under the identical spherical Gaussian model of X-means
// (Pelleg & Moore 2000, Proc. 17th ICML, 727–734): row x_i of cluster c(i)
// is drawn with probability π_j = n_j/n for its cluster and then from
// N(μ_j, σ² I_d), one variance σ² shared by every cluster and feature.
//
// Symbols: n rows, d features, k = len(sizes) clusters, n_j = sizes[j]
// (Σ n_j = n), W = inertia = Σ_i ‖x_i − μ_c(i)‖².
//
// Variance: σ̂² = W / (d·(n − k)). This is the estimate of X-means with the
// number of features put in: Pelleg & Moore write σ̂² = W/(n − k) (quoted
// from memory of the paper), the unbiased estimate for one feature, but W sums squared deviations over all
// d coordinates, so that value is d times the per-coordinate variance
// whenever d > 1 and would make the criterion depend on d through a wrong
// scale. Dividing by n − k rather than n keeps their unbiased correction for
// the k fitted centres.
//
// Log-likelihood at the fitted centres (hard assignment, as in X-means):
//
//	log L = Σ_j n_j ln(n_j/n) − (n·d/2) ln(2π σ̂²) − W/(2σ̂²)
//	      = Σ_j n_j ln(n_j/n) − (n·d/2) ln(2π σ̂²) − d(n − k)/2,
//
// with 0·ln 0 = 0 for empty clusters. Free parameters, as counted by
// Pelleg & Moore: k − 1 proportions, k·d centre coordinates and one
// variance, p = (k − 1) + k·d + 1 = k(d + 1).
//
//	BIC = −2 log L + p ln n   (lower is better)
//
// This is the sign and scale used everywhere in assort (and for the
// mixtures); Pelleg & Moore maximise log L − (p/2) ln n, which is −BIC/2, so
// both select the same k.
//
// Degenerate case: when W = 0 or n ≤ k the variance estimate is zero or
// undefined and the likelihood is unbounded; KMeansBIC then returns
// logL = +Inf and bic = −Inf. A caller choosing k must treat an infinite
// BIC as a degenerate solution (every row on its centre), not as the best.
//
// Misuse panics: d < 1, no clusters, a negative size, sizes that do not sum
// to n, or a negative or NaN inertia.
func KMeansBIC(n, d int, sizes []int64, inertia float64) (logL float64, p int, bic float64) {
	k := len(sizes)
	if d < 1 || k < 1 || n < 1 {
		panic(fmt.Sprintf("fit: k-means BIC of n=%d rows, d=%d features, k=%d clusters", n, d, k))
	}
	if !(inertia >= 0) || math.IsInf(inertia, 1) {
		panic(fmt.Sprintf("fit: k-means BIC with inertia %v", inertia))
	}
	var sum int64
	for j, s := range sizes {
		if s < 0 {
			panic(fmt.Sprintf("fit: k-means BIC: cluster %d has size %d", j, s))
		}
		sum += s
	}
	if sum != int64(n) {
		panic(fmt.Sprintf("fit: k-means BIC: sizes sum to %d, want n = %d", sum, n))
	}
	p = k * (d + 1)
	if inertia == 0 || n <= k {
		return math.Inf(1), p, math.Inf(-1)
	}
	fn, fd := float64(n), float64(d)
	var prop float64 // Σ n_j ln(n_j/n)
	for _, s := range sizes {
		if s > 0 {
			prop += float64(s) * math.Log(float64(s)/fn)
		}
	}
	sigma2 := inertia / (fd * float64(n-k))
	logL = prop - fn*fd/2*math.Log(2*math.Pi*sigma2) - fd*float64(n-k)/2
	bic = -2*logL + float64(p)*math.Log(fn)
	return logL, p, bic
}

// ICL is the integrated completed likelihood criterion of Biernacki,
// Celeux & Govaert (2000, IEEE Trans. PAMI 22(7), 719–725) in its BIC
// approximation and in assort's sign convention (lower is better):
//
//	ICL = BIC + 2E,  E = −Σ_i Σ_k τ_ik ln τ_ik ≥ 0,
//
// where τ_ik is the membership of row i in component k and E, passed as
// entropy, is the total classification entropy over rows. Overlapping
// components pay for their fuzzy memberships; a hard partition (E = 0) has
// ICL = BIC.
func ICL(bic, entropy float64) float64 {
	return bic + 2*entropy
}
