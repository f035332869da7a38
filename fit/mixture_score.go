package fit

import (
	"fmt"
	"math"
	"slices"
)

// Posterior scores one row under the fitted mixture. It writes into dst
// (length K) the membership of row in each component,
//
//	τ_k = π_k φ(x; μ_k, Σ_k) / p(x),   p(x) = Σ_j π_j φ(x; μ_j, Σ_j),
//
// computed in the log domain with log-sum-exp and Cholesky factors as in
// the fit, and returns the hard label (the highest membership, the lowest
// index on ties), its membership, ln p(x), and the Mahalanobis distance
// √((x − μ)ᵀ Σ⁻¹ (x − μ)) of row to the labelled component.
//
// Posterior does not allocate for up to 32 features and is safe for
// concurrent use. A row or dst of the wrong length panics.
func (m *MixtureResult) Posterior(dst []float64, row []float64) (label int, prob, logDensity, mahal float64) {
	mm := m.model
	k, d := mm.k, mm.d
	if len(dst) != k || len(row) != d {
		panic(fmt.Sprintf("fit: posterior of a row of %d features into %d memberships, model has %d features and %d components", len(row), len(dst), d, k))
	}
	var buf [32]float64
	y := buf[:]
	if d > len(buf) {
		y = make([]float64, d)
	}
	y = y[:d]
	best := math.Inf(-1)
	for j := range k {
		l := mm.logNorm[j] - float64(0.5*mm.mahal2(y, row, j))
		dst[j] = l
		best = max(best, l)
	}
	var sum float64
	for j, l := range dst {
		e := math.Exp(l - best)
		dst[j] = e
		sum += e
	}
	inv := 1 / sum
	for j := range dst {
		dst[j] *= inv
		if dst[j] > dst[label] {
			label = j
		}
	}
	return label, dst[label], best + math.Log(sum), math.Sqrt(mm.mahal2(y, row, label))
}

// mahal2 returns (x − μ_j)ᵀ Σ_j⁻¹ (x − μ_j), using y (length d) as scratch.
// Products are rounded before they are added (see forwardPacked).
func (m *mixModel) mahal2(y, x []float64, j int) float64 {
	d := m.d
	mu := m.mean[j*d : (j+1)*d]
	inv := m.invDiag[j*d : (j+1)*d]
	if m.diagonal() {
		var s float64
		for a, v := range x {
			t := (v - mu[a]) * inv[a]
			s += float64(t * t)
		}
		return s
	}
	for a, v := range x {
		y[a] = v - mu[a]
	}
	q := triLen(d)
	return forwardPacked(y, m.chol[j*q:(j+1)*q], inv, y)
}

// Unscale returns the means and covariances in the original units of a
// fit made on scaled rows z = (x − center) / spread (feature by feature):
//
//	μ_x = S μ_z + c,   Σ_x = S Σ_z S,   S = diag(spread).
//
// Weights and memberships do not change. The log-likelihood does, by
// −n Σ_j ln spread_j, since the density of x is that of z divided by
// Π_j spread_j. Slices of the wrong length panic.
func (m *MixtureResult) Unscale(center, spread []float64) (means, covs []float64) {
	k, d := m.K, m.D
	if len(center) != d || len(spread) != d {
		panic(fmt.Sprintf("fit: unscale %d features with %d centres and %d spreads", d, len(center), len(spread)))
	}
	means = make([]float64, k*d)
	covs = make([]float64, k*d*d)
	for j := range k {
		for a := range d {
			means[j*d+a] = m.Means[j*d+a]*spread[a] + center[a]
			for b := range d {
				covs[j*d*d+a*d+b] = spread[a] * m.Covs[j*d*d+a*d+b] * spread[b]
			}
		}
	}
	return means, covs
}

// RestoreMixture rebuilds a fitted mixture from its parameters, as stored
// from a MixtureResult (Weights, Means, Covs in the fitted space, in the
// stored component order), so that Posterior and Unscale can score new
// rows exactly as the original result did. Only the parameters, K, D,
// Covariance and Params are set; the fit's diagnostics are not restored.
//
// Errors (stored data can be damaged): an unknown structure, d < 1, no
// components, lengths that do not match k·d and k·d·d, a weight that is
// not positive and finite or weights that do not sum to 1 within 1e-9, a
// non-finite or non-symmetric matrix, a matrix that does not have the
// structure (off-diagonal entries under diag or spherical, unequal
// diagonal entries under spherical, unequal blocks under pooled), or one
// that is not positive definite.
func RestoreMixture(cov Covariance, d int, weights, means, covs []float64) (*MixtureResult, error) {
	if cov == "" {
		cov = CovFull
	}
	switch cov {
	case CovFull, CovDiag, CovSpherical, CovPooled:
	default:
		return nil, fmt.Errorf("restore mixture: unknown covariance structure %q", string(cov))
	}
	k := len(weights)
	switch {
	case d < 1 || k < 1:
		return nil, fmt.Errorf("restore mixture: %d components of %d features", k, d)
	case len(means) != k*d || len(covs) != k*d*d:
		return nil, fmt.Errorf("restore mixture: %d components of %d features need %d mean and %d covariance values, have %d and %d",
			k, d, k*d, k*d*d, len(means), len(covs))
	}
	var sum float64
	for j, w := range weights {
		if !(w > 0) || math.IsInf(w, 1) {
			return nil, fmt.Errorf("restore mixture: component %d: weight %v", j+1, w)
		}
		sum += w
	}
	if math.Abs(sum-1) > 1e-9 {
		return nil, fmt.Errorf("restore mixture: weights sum to %v", sum)
	}
	for i, v := range means {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("restore mixture: component %d: mean of feature %d is %v", i/d+1, i%d+1, v)
		}
	}
	for j := range k {
		s := covs[j*d*d : (j+1)*d*d]
		for a := range d {
			for b := range d {
				v := s[a*d+b]
				switch {
				case math.IsNaN(v) || math.IsInf(v, 0):
					return nil, fmt.Errorf("restore mixture: component %d: covariance entry (%d, %d) is %v", j+1, a+1, b+1, v)
				case v != s[b*d+a]:
					return nil, fmt.Errorf("restore mixture: component %d: covariance matrix is not symmetric", j+1)
				case a != b && v != 0 && (cov == CovDiag || cov == CovSpherical):
					return nil, fmt.Errorf("restore mixture: component %d: %s covariance with off-diagonal entry (%d, %d) = %v", j+1, cov, a+1, b+1, v)
				case a == b && cov == CovSpherical && v != s[0]:
					return nil, fmt.Errorf("restore mixture: component %d: spherical covariance with unequal variances", j+1)
				case cov == CovPooled && v != covs[a*d+b]:
					return nil, fmt.Errorf("restore mixture: component %d: pooled covariance differs from component 1's", j+1)
				}
			}
		}
	}
	m := newMixModel(k, d, cov)
	copy(m.w, weights)
	copy(m.mean, means)
	copy(m.sigma, covs)
	if err := m.factor(); err != nil {
		return nil, fmt.Errorf("restore mixture: %w", err)
	}
	return &MixtureResult{
		K: k, D: d,
		Covariance: cov,
		Weights:    slices.Clone(weights),
		Means:      slices.Clone(means),
		Covs:       slices.Clone(covs),
		Params:     paramCount(cov, k, d),
		model:      m,
	}, nil
}
