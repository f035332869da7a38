package fit

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// The likelihood of a Gaussian mixture is unbounded: a component whose
// mean sits on a row and whose covariance shrinks towards a singular
// matrix sends it to infinity, and EM happily follows such paths, most
// often onto a few rows or onto rows that share a value (McLachlan & Peel
// 2000, Finite Mixture Models, §3.10). The floor λ keeps every matrix
// invertible but does not make such a solution meaningful, so restarts
// that end in one are set aside by the rule below and never reported.

// spuriousRatio is the smallest ratio, in any direction, of a component's
// variance to the data's variance that a solution may have (see
// mixFitter.spurious).
const spuriousRatio = 1e-4

// mixMinRows is the membership, in rows' worth, that a component needs for
// its covariance to be estimable without the floor: d + 1 rows for a full
// matrix (d + 1 points in general position span d dimensions), 2 for a
// diagonal or spherical one (one spread per feature or in all), 1 for the
// pooled structure, whose matrix is estimated from all rows.
func mixMinRows(cov Covariance, d int) int {
	switch cov {
	case CovFull:
		return d + 1
	case CovDiag, CovSpherical:
		return 2
	case CovPooled:
		return 1
	}
	panic(fmt.Sprintf("fit: unknown covariance structure %q", string(cov)))
}

// spurious returns why the solution of run is degenerate, or "" if it is
// not. A solution is degenerate (spurious) when, under its final
// parameters,
//
//  1. a component holds less membership than it needs, N_k < mixMinRows
//     (N_k = Σ_i τ_ik), or
//
//  2. a component is flat in some direction compared with the data: the
//     smallest generalised eigenvalue
//
//     ρ_k = min_v (vᵀ Σ_k v) / (vᵀ (S + λI) v)
//
//     is below spuriousRatio = 1e-4, where Σ_k is the fitted covariance
//     (floor included), S the data's maximum-likelihood covariance and λ
//     the floor; ρ_k is the smallest eigenvalue of L⁻¹ Σ_k L⁻ᵀ with
//     S + λI = L Lᵀ (found by triangular solves, no inverse).
//
// ρ_k does not change under an affine change of units of the features and
// ignores directions in which the data themselves have no spread (there
// both sides hold only the floor). A component collapsed onto rows that
// share a value along some direction has ρ_k ≈ λ/s² there, where s² is the
// data's variance in that direction, so with the default Reg = 1e-6 such
// collapses are caught in every direction that carries more than 1% of the
// mean feature variance; data scaled to unit variances meet this. A Reg of
// 1e-4 or more accepts components held up by the floor alone. Legitimate
// components that are 100 times narrower than the data in some direction
// (ρ_k ≈ 1e-4) would be set aside too; that needs hundreds of components
// along one direction.
func (f *mixFitter) spurious(run *mixRun) string {
	m := run.model
	d := m.d
	need := float64(mixMinRows(m.cov, d))
	for j, nk := range run.nk {
		if nk < need {
			return fmt.Sprintf("a component of weight %.3g holds %.3g rows' worth of membership, fewer than the %g it needs", m.w[j], nk, need)
		}
	}
	comps := m.k
	if m.cov == CovPooled {
		comps = 1
	}
	w := make([]float64, d*d)
	for j := range comps {
		rho := minGenEigen(w, m.sigma[j*d*d:(j+1)*d*d], f.data.refChol, d)
		if rho < spuriousRatio {
			return fmt.Sprintf("a component of weight %.3g has %.3g times the data's variance in some direction, below %g", m.w[j], rho, spuriousRatio)
		}
	}
	return ""
}

// minGenEigen returns the smallest eigenvalue of L⁻¹ A L⁻ᵀ, for A
// symmetric (d×d) and L lower triangular packed by rows, using w (d×d) as
// scratch: W = L⁻¹ A by forward substitution on the columns of A, then
// L⁻¹ Wᵀ the same way (Wᵀ = A L⁻ᵀ as A is symmetric).
func minGenEigen(w, a, l []float64, d int) float64 {
	copy(w, a)
	solveLowerCols(w, l, d)
	for i := range d {
		for j := range i {
			w[i*d+j], w[j*d+i] = w[j*d+i], w[i*d+j]
		}
	}
	solveLowerCols(w, l, d)
	sym := mat.NewSymDense(d, nil)
	for i := range d {
		for j := i; j < d; j++ {
			sym.SetSym(i, j, 0.5*(w[i*d+j]+w[j*d+i]))
		}
	}
	var eig mat.EigenSym
	if !eig.Factorize(sym, false) {
		return 0
	}
	return eig.Values(nil)[0]
}

// solveLowerCols overwrites the d×d matrix b (row-major) with L⁻¹ b, L
// lower triangular packed by rows, by forward substitution.
func solveLowerCols(b, l []float64, d int) {
	for i := range d {
		ri := i * (i + 1) / 2
		for p := range i {
			lp := l[ri+p]
			for c := range d {
				b[i*d+c] -= lp * b[p*d+c]
			}
		}
		inv := 1 / l[ri+i]
		for c := range d {
			b[i*d+c] *= inv
		}
	}
}
