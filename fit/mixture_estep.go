package fit

import (
	"context"
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
)

// mixStats are the sufficient statistics of one pass over some rows (one
// chunk, or all of them after reduction), taken around the means μ_k of
// the model that produced them (see mStep). eChunk leaves sz and szz in
// each component's whitened coordinates y = L_k⁻¹ (x − μ_k) until
// mixModel.unwhiten maps them back; the hard pass of a start fills them in
// the data's coordinates.
type mixStats struct {
	k, d int
	nk   []float64 // K: Σ r_ik
	sz   []float64 // K×d: Σ r_ik (x_i − μ_k), or Σ r_ik y_ik
	szz  []float64 // K×sumLen: Σ r_ik (x_i − μ_k)(x_i − μ_k)ᵀ or Σ r_ik y_ik y_ikᵀ, packed lower or diagonal
	ll   float64   // Σ ln p(x_i)
	ent  float64   // Σ_i −Σ_k r_ik ln r_ik
	// The rows with the lowest ln p(x), ascending (ties by row index), at
	// most K of them, with their values: candidates for re-seeding.
	nw       int
	worstLD  []float64
	worstRow []int
	worstX   []float64
}

func newMixStats(k, d, sumLen int) *mixStats {
	return &mixStats{
		k: k, d: d,
		nk:       make([]float64, k),
		sz:       make([]float64, k*d),
		szz:      make([]float64, k*sumLen),
		worstLD:  make([]float64, k),
		worstRow: make([]int, k),
		worstX:   make([]float64, k*d),
	}
}

func (s *mixStats) reset() {
	clear(s.nk)
	clear(s.sz)
	clear(s.szz)
	s.ll, s.ent, s.nw = 0, 0, 0
}

// offerWorst records row (index i, values x, log density ld) if it is among
// the K lowest seen so far, ordered by (ld, i).
func (s *mixStats) offerWorst(ld float64, i int, x []float64) {
	c := len(s.worstLD)
	if s.nw == c && !(ld < s.worstLD[c-1] || ld == s.worstLD[c-1] && i < s.worstRow[c-1]) {
		return
	}
	p := 0
	for p < s.nw && (s.worstLD[p] < ld || s.worstLD[p] == ld && s.worstRow[p] < i) {
		p++
	}
	if s.nw < c {
		s.nw++
	}
	d := s.d
	for q := s.nw - 1; q > p; q-- {
		s.worstLD[q] = s.worstLD[q-1]
		s.worstRow[q] = s.worstRow[q-1]
		copy(s.worstX[q*d:(q+1)*d], s.worstX[(q-1)*d:q*d])
	}
	s.worstLD[p] = ld
	s.worstRow[p] = i
	copy(s.worstX[p*d:(p+1)*d], x)
}

// add folds o into s. Reduction in chunk order makes the result independent
// of the number of workers.
func (s *mixStats) add(o *mixStats) {
	for j, v := range o.nk {
		s.nk[j] += v
	}
	for j, v := range o.sz {
		s.sz[j] += v
	}
	for j, v := range o.szz {
		s.szz[j] += v
	}
	s.ll += o.ll
	s.ent += o.ent
	d := s.d
	for p := range o.nw {
		s.offerWorst(o.worstLD[p], o.worstRow[p], o.worstX[p*d:(p+1)*d])
	}
}

// mixExpCut is the exponent below which exp(ℓ_k − m) is taken as zero in
// the responsibilities. e^−700 ≈ 1e−304 is still a normal double, so no
// responsibility, and few products with it, fall into the subnormal range,
// where arithmetic is many times slower on common processors; the terms
// dropped are below 1e−304 relative to the row's largest and cannot change
// any sum.
const mixExpCut = -700

// mixBlockFloats bounds the per-worker buffer of whitened rows (K×d×b
// values for a block of b rows) so that it stays in a core's L2 cache.
const mixBlockFloats = 1 << 15

// mixBlockRows is the number of rows b processed together: at most 256,
// at least 16, and K·d·b ≤ mixBlockFloats where possible.
func mixBlockRows(k, d int) int {
	return max(16, min(256, mixBlockFloats/(k*d)))
}

// mixScratch is one worker's working space for a block of b rows, stored
// feature-major (feature a of the block is a contiguous run of b values),
// so the hot loops run over rows with unit stride and the hot loop does not
// allocate.
type mixScratch struct {
	b  int
	xt []float64 // d×b: the block, transposed
	y  []float64 // K×d×b: y_k = L_k⁻¹ (x − μ_k)
	mh []float64 // b: Mahalanobis lengths ‖y_k‖²
	lp []float64 // K×b: ℓ_k = ln π_k + ln φ(x; μ_k, Σ_k)
	r  []float64 // K×b: responsibilities
	w  []float64 // b: r ⊙ y_a
	// best and sum hold per row the largest ℓ_k and Σ_k exp(ℓ_k − best),
	// then ln p(x) and the reciprocal of the sum.
	best, sum []float64
}

func newMixScratch(k, d int) *mixScratch {
	b := mixBlockRows(k, d)
	return &mixScratch{
		b:    b,
		xt:   make([]float64, d*b),
		y:    make([]float64, k*d*b),
		mh:   make([]float64, b),
		lp:   make([]float64, k*b),
		r:    make([]float64, k*b),
		w:    make([]float64, b),
		best: make([]float64, b),
		sum:  make([]float64, b),
	}
}

// eChunk runs the expectation step over the rows of one chunk (row-major,
// first is the index of its first row) and adds to st, in the same pass,
// the sums the maximisation step needs. For row x and component k,
//
//	ℓ_k = ln π_k − ½(d ln 2π + ln|Σ_k|) − ½‖y_k‖²,  L_k y_k = x − μ_k,
//	ln p(x) = m + ln Σ_k exp(ℓ_k − m),  m = max_k ℓ_k     (log-sum-exp),
//	r_k = exp(ℓ_k − m) / Σ_j exp(ℓ_j − m),
//
// where L_k is the Cholesky factor of Σ_k: y_k comes from forward
// substitution, never from an inverse, and ln|Σ_k| from the factor's
// diagonal. Terms with ℓ_k − m below mixExpCut are taken as zero. The
// class entropy −Σ_k r_k ln r_k uses ln r_k = ℓ_k − ln p(x), and terms with
// r_k = 0 are zero.
//
// The sums for the maximisation step are taken in the whitened
// coordinates y_k, which are at hand and of unit spread: N_k = Σ r_k,
// Σ r_k y_k and Σ r_k y_k y_kᵀ; mixModel.unwhiten maps them back to the
// data's coordinates once per pass. Centring on μ_k avoids the
// cancellation of raw moments (see mStep).
//
// Rows are taken in blocks of b (mixBlockRows) and transposed, so that
// each step is a loop over rows with unit stride: the forward substitution
// y_a = (x_a − μ_a)/L_aa − Σ_{c<a} (L_ac/L_aa) y_c runs on whole columns
// (axpy), and the sums Σ_i r_i y_ia y_ib are dot products of columns
// (gonum's floats, with assembly kernels). The block layout depends only
// on the chunk, so the sums do not depend on the number of workers.
func (m *mixModel) eChunk(st *mixStats, sc *mixScratch, rows []float64, first int) {
	d := m.d
	if len(rows)%d != 0 {
		panic(fmt.Sprintf("fit: chunk of %d values is not whole rows of %d features", len(rows), d))
	}
	step := sc.b * d
	for lo := 0; lo < len(rows); lo += step {
		hi := min(lo+step, len(rows))
		m.eBlock(st, sc, rows[lo:hi], first+lo/d)
	}
}

// eBlock is eChunk for one block of at most sc.b rows.
func (m *mixModel) eBlock(st *mixStats, sc *mixScratch, rows []float64, first int) {
	d, k := m.d, m.k
	nb := len(rows) / d
	diag := m.diagonal()
	q := triLen(d)
	sl := m.sumLen()
	xt := sc.xt[:d*nb]
	for a := range d {
		xa := xt[a*nb : (a+1)*nb]
		for i := range xa {
			xa[i] = rows[i*d+a]
		}
	}
	mh := sc.mh[:nb]
	for j := range k {
		y := sc.y[j*d*nb : (j+1)*d*nb]
		inv := m.invDiag[j*d : (j+1)*d]
		ls := m.lsc[j*q : (j+1)*q]
		clear(mh)
		for a := range d {
			xa := xt[a*nb : (a+1)*nb]
			ya := y[a*nb : (a+1)*nb]
			ya = ya[:len(xa)]
			shiftScale(ya, xa, m.mean[j*d+a], inv[a])
			if !diag {
				ra := a * (a + 1) / 2
				for c, lac := range ls[ra : ra+a] {
					floats.AddScaled(ya, -lac, y[c*nb:(c+1)*nb])
				}
			}
			addSquares(mh, ya)
		}
		lp := sc.lp[j*nb : (j+1)*nb]
		lp = lp[:len(mh)]
		ln := m.logNorm[j]
		for i, v := range mh {
			lp[i] = ln - 0.5*v
		}
	}
	// Log-sum-exp per row, component by component over whole rows.
	best, sum := sc.best[:nb], sc.sum[:nb]
	copy(best, sc.lp[:nb])
	for j := 1; j < k; j++ {
		lp := sc.lp[j*nb : (j+1)*nb]
		lp = lp[:len(best)]
		for i, v := range lp {
			best[i] = max(best[i], v)
		}
	}
	clear(sum)
	for j := range k {
		lp := sc.lp[j*nb : (j+1)*nb]
		r := sc.r[j*nb : (j+1)*nb]
		expShifted(r, sum, lp, best, mixExpCut)
	}
	// best becomes ln p(x), sum becomes 1/Σ.
	var ll float64
	for i, s := range sum {
		l := best[i] + math.Log(s)
		best[i] = l
		sum[i] = 1 / s
		ll += l
	}
	st.ll += ll
	var ent float64
	for j := range k {
		lp := sc.lp[j*nb : (j+1)*nb]
		r := sc.r[j*nb : (j+1)*nb]
		lp, r, lse := lp[:len(sum)], r[:len(sum)], best[:len(sum)]
		for i, inv := range sum {
			rj := r[i] * inv
			r[i] = rj
			if rj != 0 {
				ent -= rj * (lp[i] - lse[i])
			}
		}
	}
	st.ent += ent
	for i, l := range best {
		st.offerWorst(l, first+i, rows[i*d:i*d+d])
	}
	w := sc.w[:nb]
	for j := range k {
		rj := sc.r[j*nb : (j+1)*nb]
		rj = rj[:len(w)]
		nk := floats.Sum(rj)
		if nk == 0 {
			continue
		}
		st.nk[j] += nk
		y := sc.y[j*d*nb : (j+1)*d*nb]
		sz := st.sz[j*d : (j+1)*d]
		szz := st.szz[j*sl : (j+1)*sl]
		off := 0
		for a := range d {
			ya := y[a*nb : (a+1)*nb]
			ya = ya[:len(w)]
			mulTo(w, rj, ya)
			sz[a] += floats.Sum(w)
			if diag {
				szz[a] += floats.Dot(w, ya)
				continue
			}
			for c := 0; c <= a; c++ {
				szz[off+c] += floats.Dot(w, y[c*nb:(c+1)*nb])
			}
			off += a + 1
		}
	}
}

// mixPass runs the fused expectation–maximisation pass (eChunk) over a
// source with a fixed pool of workers and per-worker scratch space. The
// per-chunk statistics are folded into the total in chunk order
// (orderedReduce), so the total is the same for any number of workers.
type mixPass struct {
	src     Source
	workers int
	k, d    int
	sumLen  int
	total   *mixStats
	scratch []*mixScratch
}

func newMixPass(src Source, workers, k int, cov Covariance) *mixPass {
	d := src.Dim()
	sl := d
	if cov != CovDiag && cov != CovSpherical {
		sl = triLen(d)
	}
	p := &mixPass{src: src, workers: workerCount(workers), k: k, d: d, sumLen: sl, total: newMixStats(k, d, sl)}
	p.scratch = make([]*mixScratch, p.workers)
	for w := range p.scratch {
		p.scratch[w] = newMixScratch(k, d)
	}
	return p
}

// run returns the statistics of one pass under m (owned by p, valid until
// the next run).
func (p *mixPass) run(ctx context.Context, m *mixModel) (*mixStats, error) {
	return p.each(ctx, func(st *mixStats, w int, rows []float64, first int) {
		m.eChunk(st, p.scratch[w], rows, first)
	})
}

// each runs fn over every chunk with zeroed per-chunk statistics and
// returns their total.
func (p *mixPass) each(ctx context.Context, fn func(st *mixStats, w int, rows []float64, first int)) (*mixStats, error) {
	p.total.reset()
	red := newOrderedReduce(func() *mixStats { return newMixStats(p.k, p.d, p.sumLen) }, p.total.add)
	err := eachChunk(ctx, p.src, p.workers, func(w, c int, rows []float64, first int) error {
		st := red.part()
		st.reset()
		fn(st, w, rows, first)
		red.done(c, st)
		return nil
	})
	if err != nil {
		return nil, err
	}
	return p.total, nil
}
