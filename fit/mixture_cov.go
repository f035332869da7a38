package fit

import (
	"fmt"
	"math"
)

// This file holds the small dense linear algebra of the mixture fit:
// weighted maximum-likelihood scatter, Cholesky factors packed by rows,
// and the maximisation step that turns accumulated sums into covariance
// matrices of the four structures.

// triLen is q = d(d+1)/2, the number of entries of a d×d lower triangle.
func triLen(d int) int { return d * (d + 1) / 2 }

// weightedScatter writes the weighted mean and the maximum-likelihood
// scatter of the n rows of x (row-major, d features) into mean (length d)
// and cov (d×d, row-major) and returns the total weight W:
//
//	W = Σ_i w_i,   μ = Σ_i w_i x_i / W,   C = Σ_i w_i (x_i − μ)(x_i − μ)ᵀ / W.
//
// C is divided by W, not by W − 1: it is the maximum-likelihood estimate
// that the EM maximisation step needs (Dempster, Laird & Rubin 1977, §4.3),
// where w_i are responsibilities, not frequency weights. gonum's
// stat.CovarianceMatrix divides by W − 1 and is therefore not used.
//
// A nil w means every weight is one. The products are formed around μ in a
// second pass over x, so no cancellation of the kind Σ w x xᵀ − W μ μᵀ
// occurs. When W = 0, mean and cov are set to zero and 0 is returned.
// Inputs are not modified.
func weightedScatter(mean, cov, x []float64, d int, w []float64) float64 {
	if d <= 0 || len(x)%d != 0 || len(mean) != d || len(cov) != d*d {
		panic(fmt.Sprintf("fit: weighted scatter of %d values with d=%d into mean %d, cov %d", len(x), d, len(mean), len(cov)))
	}
	n := len(x) / d
	if w != nil && len(w) != n {
		panic(fmt.Sprintf("fit: weighted scatter of %d rows with %d weights", n, len(w)))
	}
	clear(mean)
	clear(cov)
	var total float64
	for i := range n {
		wi := 1.0
		if w != nil {
			wi = w[i]
		}
		total += wi
		row := x[i*d : (i+1)*d]
		for a, v := range row {
			mean[a] += wi * v
		}
	}
	if total == 0 {
		clear(mean)
		return 0
	}
	for a := range mean {
		mean[a] /= total
	}
	for i := range n {
		wi := 1.0
		if w != nil {
			wi = w[i]
		}
		row := x[i*d : (i+1)*d]
		for a := range d {
			za := wi * (row[a] - mean[a])
			for b := 0; b <= a; b++ {
				cov[a*d+b] += za * (row[b] - mean[b])
			}
		}
	}
	for a := range d {
		for b := 0; b <= a; b++ {
			v := cov[a*d+b] / total
			cov[a*d+b] = v
			cov[b*d+a] = v
		}
	}
	return total
}

// cholPacked factors the symmetric matrix a (d×d, row-major; only its lower
// triangle is read) as a = L Lᵀ with L lower triangular, and writes L packed
// by rows into dst (length q = d(d+1)/2; entry (i, j), j ≤ i, at
// i(i+1)/2 + j). It uses the Cholesky–Banachiewicz order (Golub & Van Loan,
// Matrix Computations, 4th ed., Alg. 4.2.2). It reports false when a is not
// numerically positive definite: a pivot that is not > 0, or NaN.
func cholPacked(dst, a []float64, d int) bool {
	if len(dst) != triLen(d) || len(a) != d*d {
		panic(fmt.Sprintf("fit: Cholesky of %d values into %d for d=%d", len(a), len(dst), d))
	}
	for i := range d {
		ri := i * (i + 1) / 2
		for j := 0; j <= i; j++ {
			rj := j * (j + 1) / 2
			s := a[i*d+j]
			for p := range j {
				s -= dst[ri+p] * dst[rj+p]
			}
			if i == j {
				if !(s > 0) {
					return false
				}
				dst[ri+i] = math.Sqrt(s)
			} else {
				dst[ri+j] = s / dst[rj+j]
			}
		}
	}
	return true
}

// forwardPacked solves L y = z for y by forward substitution, L lower
// triangular packed by rows (see cholPacked) with reciprocal diagonal inv
// (inv[a] = 1/L_aa), and returns ‖y‖² = zᵀ (L Lᵀ)⁻¹ z, the squared
// Mahalanobis length of z. y may alias z. Every product is rounded
// before it is added (float64(a·b), which the Go specification says keeps
// the compiler from fusing a multiply-add), so the result has the same
// bits on every architecture, and as the SQL scoring functions compute it.
func forwardPacked(y, l, inv, z []float64) float64 {
	var m float64
	off := 0
	for a := range z {
		s := z[a]
		row := l[off : off+a]
		ya := y[:a]
		for b, v := range row {
			s -= float64(v * ya[b])
		}
		s *= inv[a]
		y[a] = s
		m += float64(s * s)
		off += a + 1
	}
	return m
}

// unpackSym writes the packed lower triangle l as a full symmetric d×d
// matrix into dst.
func unpackSym(dst, l []float64, d int) {
	for a := range d {
		ra := a * (a + 1) / 2
		for b := 0; b <= a; b++ {
			dst[a*d+b] = l[ra+b]
			dst[b*d+a] = l[ra+b]
		}
	}
}

// paramCount is the number of free parameters of a mixture of k Gaussian
// components in d features with the given covariance structure:
//
//	p = (k − 1) weights + k·d means + c,
//
// where c counts the covariance entries: full k·d(d+1)/2, diag k·d,
// spherical k, pooled d(d+1)/2 (one matrix shared by all components).
// These are the counts used by Fraley & Raftery (2002, JASA 97, 611–631)
// for the models VVV, VVI, VII and EEE, and by scikit-learn.
func paramCount(cov Covariance, k, d int) int {
	var c int
	switch cov {
	case CovFull:
		c = k * triLen(d)
	case CovDiag:
		c = k * d
	case CovSpherical:
		c = k
	case CovPooled:
		c = triLen(d)
	default:
		panic(fmt.Sprintf("fit: unknown covariance structure %q", string(cov)))
	}
	return k - 1 + k*d + c
}

// mStep sets m from the sufficient statistics st of one pass, gathered
// around the previous means shift (K×d), with the covariance floor λ
// (floor) added to every diagonal. For component k, with responsibilities
// r_ik of the pass,
//
//	N_k = Σ_i r_ik,   s_k = Σ_i r_ik (x_i − m_k),   T_k = Σ_i r_ik (x_i − m_k)(x_i − m_k)ᵀ,
//
// where m_k is the shift, the update of Dempster, Laird & Rubin (1977) is
//
//	π_k = N_k / Σ_j N_j,   δ_k = s_k / N_k,   μ_k = m_k + δ_k,
//	C_k = T_k / N_k − δ_k δ_kᵀ   (maximum-likelihood scatter around μ_k),
//
// and the covariance by structure (Celeux & Govaert 1995, Pattern
// Recognition 28(5), 781–793):
//
//	full       Σ_k = C_k + λI
//	diag       Σ_k = diag(C_k) + λI
//	spherical  Σ_k = (tr C_k / d + λ) I
//	pooled     Σ   = Σ_k N_k C_k / Σ_k N_k + λI, shared by all components.
//
// Accumulating around the previous means (a shifted-data scheme, Chan,
// Golub & LeVeque 1983, Amer. Statist. 37, 242–247) keeps T_k/N_k and δ δᵀ
// of the order of the component's spread, so the subtraction loses almost
// nothing; once EM settles δ is near zero.
//
// Components holding less than minMass rows' worth of membership
// (N_k < minMass) are not updated here: their indexes are returned in
// empty, and the caller re-seeds them (setting their weights) before
// calling m.factor. For the pooled structure every block of m.sigma
// receives the shared matrix.
func (m *mixModel) mStep(st *mixStats, shift []float64, floor float64, empty []int) []int {
	k, d := m.k, m.d
	empty = empty[:0]
	var total float64
	for j := range k {
		nj := st.nk[j]
		if !(nj >= minMass) {
			empty = append(empty, j)
			nj = minMass
		}
		total += nj
	}
	for j := range k {
		nj := st.nk[j]
		if !(nj >= minMass) {
			nj = minMass
		}
		m.w[j] = nj / total
	}
	q := m.sumLen()
	sig := m.sigma
	if m.cov == CovPooled {
		clear(sig[:d*d])
	}
	for j := range k {
		nj := st.nk[j]
		if !(nj >= minMass) {
			copy(m.mean[j*d:(j+1)*d], shift[j*d:(j+1)*d])
			continue
		}
		sz := st.sz[j*d : (j+1)*d]
		szz := st.szz[j*q : (j+1)*q]
		mu := m.mean[j*d : (j+1)*d]
		for a := range d {
			mu[a] = shift[j*d+a] + sz[a]/nj
		}
		switch m.cov {
		case CovFull:
			s := sig[j*d*d : (j+1)*d*d]
			for a := range d {
				da := sz[a] / nj
				ra := a * (a + 1) / 2
				for b := 0; b <= a; b++ {
					v := szz[ra+b]/nj - da*(sz[b]/nj)
					if a == b {
						v += floor
					}
					s[a*d+b] = v
					s[b*d+a] = v
				}
			}
		case CovDiag:
			s := sig[j*d*d : (j+1)*d*d]
			clear(s)
			for a := range d {
				da := sz[a] / nj
				s[a*d+a] = szz[a]/nj - da*da + floor
			}
		case CovSpherical:
			s := sig[j*d*d : (j+1)*d*d]
			clear(s)
			var t float64
			for a := range d {
				da := sz[a] / nj
				t += szz[a]/nj - da*da
			}
			v := t/float64(d) + floor
			for a := range d {
				s[a*d+a] = v
			}
		case CovPooled:
			// Σ_k N_k C_k = Σ_k (T_k − s_k s_kᵀ / N_k), lower triangle.
			for a := range d {
				ra := a * (a + 1) / 2
				for b := 0; b <= a; b++ {
					sig[a*d+b] += szz[ra+b] - sz[a]*(sz[b]/nj)
				}
			}
		}
	}
	if m.cov == CovPooled {
		var held float64
		for j := range k {
			if st.nk[j] >= minMass {
				held += st.nk[j]
			}
		}
		for a := range d {
			for b := 0; b <= a; b++ {
				v := sig[a*d+b] / held
				if a == b {
					v += floor
				}
				sig[a*d+b] = v
				sig[b*d+a] = v
			}
		}
		for j := 1; j < k; j++ {
			copy(sig[j*d*d:(j+1)*d*d], sig[:d*d])
		}
	}
	return empty
}

// minMass is the membership, in rows' worth, below which a component is
// said to have lost its weight during EM and is re-seeded.
const minMass = 1.0
