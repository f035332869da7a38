package fit

import (
	"fmt"
	"math"
)

// ln2Pi is ln(2π).
var ln2Pi = math.Log(2 * math.Pi)

// mixModel is one set of mixture parameters in the form the passes use.
type mixModel struct {
	k, d int
	cov  Covariance
	w    []float64 // K weights π_k
	mean []float64 // K×d means μ_k
	// sigma holds K blocks of d×d covariance matrices Σ_k, floor included,
	// always full (diag and spherical have zero off-diagonals; pooled
	// repeats one matrix).
	sigma   []float64
	chol    []float64 // K blocks of q packed lower Cholesky factors L_k, Σ_k = L_k L_kᵀ
	invDiag []float64 // K×d reciprocal diagonals 1/(L_k)_aa
	// lsc holds the factors with each row divided by its diagonal entry,
	// (L_k)_ac/(L_k)_aa, packed like chol, for the forward substitution
	// of eBlock.
	lsc     []float64
	logDet  []float64 // K values ln|Σ_k| = 2 Σ_a ln (L_k)_aa
	logNorm []float64 // K values ln π_k − ½(d ln 2π + ln|Σ_k|)
}

func newMixModel(k, d int, cov Covariance) *mixModel {
	return &mixModel{
		k: k, d: d, cov: cov,
		w:       make([]float64, k),
		mean:    make([]float64, k*d),
		sigma:   make([]float64, k*d*d),
		chol:    make([]float64, k*triLen(d)),
		lsc:     make([]float64, k*triLen(d)),
		invDiag: make([]float64, k*d),
		logDet:  make([]float64, k),
		logNorm: make([]float64, k),
	}
}

// diagonal reports whether the covariance matrices are diagonal, so that
// the passes use the cheap diagonal arithmetic.
func (m *mixModel) diagonal() bool { return m.cov == CovDiag || m.cov == CovSpherical }

// sumLen is the length per component of the accumulated second moments:
// the packed lower triangle (q) for full and pooled, the diagonal (d) for
// diag and spherical.
func (m *mixModel) sumLen() int {
	if m.diagonal() {
		return m.d
	}
	return triLen(m.d)
}

func (m *mixModel) copyFrom(o *mixModel) {
	m.k, m.d, m.cov = o.k, o.d, o.cov
	copy(m.w, o.w)
	copy(m.mean, o.mean)
	copy(m.sigma, o.sigma)
	copy(m.chol, o.chol)
	copy(m.lsc, o.lsc)
	copy(m.invDiag, o.invDiag)
	copy(m.logDet, o.logDet)
	copy(m.logNorm, o.logNorm)
}

// factor computes the Cholesky factors, log-determinants and normalising
// constants from m.w and m.sigma. It returns an error naming the component
// whose matrix is not numerically positive definite.
func (m *mixModel) factor() error {
	k, d, q := m.k, m.d, triLen(m.d)
	for j := range k {
		l := m.chol[j*q : (j+1)*q]
		s := m.sigma[j*d*d : (j+1)*d*d]
		if m.cov == CovPooled && j > 0 {
			copy(l, m.chol[:q])
		} else if m.diagonal() {
			clear(l)
			for a := range d {
				v := s[a*d+a]
				if !(v > 0) || math.IsInf(v, 1) {
					return fmt.Errorf("component %d: variance %g of feature %d is not positive and finite", j+1, v, a+1)
				}
				l[a*(a+1)/2+a] = math.Sqrt(v)
			}
		} else if !cholPacked(l, s, d) {
			return fmt.Errorf("component %d: covariance matrix is not positive definite", j+1)
		}
		var ld float64
		ls := m.lsc[j*q : (j+1)*q]
		for a := range d {
			ra := a * (a + 1) / 2
			v := l[ra+a]
			inv := 1 / v
			m.invDiag[j*d+a] = inv
			for c := range a + 1 {
				ls[ra+c] = l[ra+c] * inv
			}
			ld += math.Log(v)
		}
		m.logDet[j] = 2 * ld
		m.logNorm[j] = math.Log(m.w[j]) - 0.5*(float64(d)*ln2Pi+m.logDet[j])
	}
	return nil
}

// unwhiten turns statistics gathered by eChunk under m, whose sums are
// taken in the whitened coordinates y = L_k⁻¹ (x − μ_k) of each
// component, into sums around the means in the data's coordinates, as
// mStep expects:
//
//	s_k = Σ_i r_ik (x_i − μ_k) = L_k Σ_i r_ik y_ik,
//	T_k = Σ_i r_ik (x_i − μ_k)(x_i − μ_k)ᵀ = L_k (Σ_i r_ik y_ik y_ikᵀ) L_kᵀ.
//
// L_k is fixed during a pass, so the transformation is applied once to
// the reduced sums (O(K d³)), not per row.
func (m *mixModel) unwhiten(st *mixStats) {
	d, q := m.d, triLen(m.d)
	if m.diagonal() {
		for j := range m.k {
			l := m.chol[j*q : (j+1)*q]
			for a := range d {
				v := l[a*(a+1)/2+a]
				st.sz[j*d+a] *= v
				st.szz[j*d+a] *= v * v
			}
		}
		return
	}
	tmp := make([]float64, d)
	full := make([]float64, d*d)
	ly := make([]float64, d*d)
	for j := range m.k {
		l := m.chol[j*q : (j+1)*q]
		sz := st.sz[j*d : (j+1)*d]
		copy(tmp, sz)
		for a := range d {
			ra := a * (a + 1) / 2
			var v float64
			for c := 0; c <= a; c++ {
				v += l[ra+c] * tmp[c]
			}
			sz[a] = v
		}
		szz := st.szz[j*q : (j+1)*q]
		unpackSym(full, szz, d)
		// ly = L Y, then T = ly Lᵀ (lower triangle).
		for a := range d {
			ra := a * (a + 1) / 2
			for b := range d {
				var v float64
				for c := 0; c <= a; c++ {
					v += l[ra+c] * full[c*d+b]
				}
				ly[a*d+b] = v
			}
		}
		for a := range d {
			for b := 0; b <= a; b++ {
				rb := b * (b + 1) / 2
				var v float64
				for c := 0; c <= b; c++ {
					v += ly[a*d+c] * l[rb+c]
				}
				szz[a*(a+1)/2+b] = v
			}
		}
	}
}
