package fit

import (
	"fmt"
	"slices"
)

// Factors returns copies of the constants Posterior scores a row with, for
// code that must repeat its arithmetic elsewhere (the SQL scoring functions
// in package schema). Components are in the result's order; K components,
// D features:
//
//   - chol holds K blocks of D(D+1)/2 values, the lower Cholesky factor
//     L_k of Σ_k = L_k L_kᵀ packed by rows: (L_k)_ab, b ≤ a, is at
//     k·D(D+1)/2 + a(a+1)/2 + b. Pooled repeats one block; diag and
//     spherical hold the square roots of the variances on the diagonal and
//     zeros elsewhere.
//   - invDiag holds K×D reciprocal diagonals 1/(L_k)_aa.
//   - logNorm holds K constants ln π_k − ½(D ln 2π + ln|Σ_k|), where
//     ln|Σ_k| = 2 Σ_a ln (L_k)_aa.
//   - diagonal is true for the diag and spherical structures, for which
//     Posterior uses z_a = (x_a − μ_ka)·invDiag_ka instead of the forward
//     substitution z_a = ((x_a − μ_ka) − Σ_{b<a} (L_k)_ab z_b)·invDiag_ka.
//
// With these, the log of component k's weighted density at a row x (in the
// fitted space) is l_k = logNorm_k − 0.5·Σ_a z_a², and Posterior's label is
// the first k whose exp(l_k − max_j l_j) is 1. Factors panics on a
// MixtureResult that was not made by Mixture or RestoreMixture.
func (m *MixtureResult) Factors() (chol, invDiag, logNorm []float64, diagonal bool) {
	mm := m.model
	if mm == nil {
		panic(fmt.Sprintf("fit: mixture result of %d components has no fitted model", m.K))
	}
	return slices.Clone(mm.chol), slices.Clone(mm.invDiag), slices.Clone(mm.logNorm), mm.diagonal()
}
