package fit

import (
	"context"
	"fmt"
	"math"
	"slices"
)

// hamerlyState holds the bounds of Hamerly's accelerated Lloyd iterations
// (G. Hamerly 2010, "Making k-means even faster", Proc. 2010 SIAM
// International Conference on Data Mining, 130–140) for one lloydRun.
//
// For row x_i with label a_i (r.labels) it keeps
//
//	u_i ≥ ‖x_i − c_{a_i}‖        an upper bound on the distance to its own centre,
//	l_i ≤ min_{j≠a_i} ‖x_i − c_j‖  a lower bound on the distance to every other centre,
//
// distances, not squares, because the bounds move by the triangle
// inequality. Memory: 16 bytes per row for u and l, on top of the 4-byte
// label every lloydRun keeps, so 20 bytes per row (2 GB for 10⁸ rows); the
// caller decides whether that fits.
//
// Each pass with centres c first computes, for every centre j,
//
//	s_j = ½ min_{j'≠j} ‖c_j − c_j'‖   (K(K−1)/2 centre–centre distances),
//	p_j = ‖c_j − c_j^prev‖             (K distances to the previous pass's centres),
//
// then moves each row's bounds by the shifts, u_i += p_{a_i} and
// l_i −= max_{j≠a_i} p_j, and skips the row, keeping its label, when
// u_i < max(s_{a_i}, l_i): then ‖x_i − c_j‖ > ‖x_i − c_{a_i}‖ for every
// j ≠ a_i (for j ≠ a_i, ‖x_i − c_j‖ ≥ 2s_{a_i} − u_i > s_{a_i} > u_i).
// Otherwise u_i is tightened to the exact distance to c_{a_i} and the test
// repeated; if it still fails all K distances are computed and u_i, l_i
// reset from the nearest and second-nearest.
//
// Exactness. Plain Lloyd's label is the first strict minimum of the
// rounded squared distances fl(‖x − c_j‖²). The bounds are kept valid for
// the exact distances between the stored vectors despite rounding: a
// computed distance √fl(v) enters an upper bound as √fl(v)·(1+ρ) + α and a
// lower bound as √fl(v)·(1−ρ) − α, every shifted bound is widened by the
// factor 1 ± ρ, and a row is skipped only when u·(1+ρ) + α < max(s, l).
// ρ = (d+8)·2⁻⁴⁹ is sixteen times the relative error (d+2)·2⁻⁵³ of a sum
// of d rounded squares of rounded differences (the inner-product bound
// γ_n of N. J. Higham 2002, Accuracy and Stability of Numerical
// Algorithms, 2nd ed., section 3.1, from memory), and α = 2⁻⁵⁰⁰ is far
// above the absolute error √(d·2⁻¹⁰⁷⁴) that underflow can add; so a
// skipped row's exact distances differ by so much that the rounded
// squares keep the same strict order, and its label is the one plain
// Lloyd computes, never a tie. Ties, NaN and infinities fail the strict
// test and fall back to the full scan (nearestTwoRows), which reproduces
// assignRows's choice. Since the sums S_k are then rebuilt from scratch
// in the same row and chunk order as plain Lloyd's, centres, counts,
// stops and re-seeding are bit for bit the same. The margin costs little:
// only rows whose nearest two centres are within a relative 10⁻¹³ or so
// (d = 8) are scanned for its sake.
//
// With a single lower bound the saving shrinks as K grows (every row
// whose second-nearest centre moves far is rescanned); it suits the
// moderate K assort fits.
type hamerlyState struct {
	upper, lower []float64 // u_i, l_i, per row
	prev         []float64 // K×D centres of the previous pass
	havePrev     bool      // prev holds a pass of the current run
	shifted      bool      // this pass moves the bounds by shift
	shift        []float64 // p_j, upper bounds
	half         []float64 // s_j, lower bounds
	nearCC       []float64 // scratch: min_{j'≠j} fl(‖c_j − c_j'‖²)
	shiftMax     float64   // max_j p_j
	shiftNext    float64   // max_{j≠argMax} p_j
	argMax       int
	grow, shrink float64          // 1 + ρ and 1 − ρ
	alpha        float64          // α
	scratch      []hamerlyScratch // per worker
}

// hamerlyAlpha is α above: 2⁻⁵⁰⁰.
var hamerlyAlpha = math.Ldexp(1, -500)

func newHamerlyState(n, k, d int) *hamerlyState {
	rho := float64(d+8) * math.Ldexp(1, -49)
	return &hamerlyState{
		upper:  make([]float64, n),
		lower:  make([]float64, n),
		prev:   make([]float64, k*d),
		shift:  make([]float64, k),
		half:   make([]float64, k),
		nearCC: make([]float64, k),
		grow:   1 + rho,
		shrink: 1 - rho,
		alpha:  hamerlyAlpha,
	}
}

// reset forgets the previous pass; the next pass scans every row (the
// caller has set every label to −1).
func (h *hamerlyState) reset() { h.havePrev, h.shifted = false, false }

// prepare computes the shifts p_j from the previous pass's centres (if
// any) and the half-distances s_j for centres c, records c as the previous
// centres, and returns the number of distances computed.
func (h *hamerlyState) prepare(c []float64, k, d int) int64 {
	var evals int64
	h.shifted = h.havePrev
	if h.shifted {
		h.shiftMax, h.shiftNext, h.argMax = math.Inf(-1), math.Inf(-1), 0
		for j := range k {
			cj, pj := c[j*d:(j+1)*d], h.prev[j*d:(j+1)*d]
			p := 0.0
			if !slices.Equal(cj, pj) {
				p = math.Sqrt(sqDist(cj, pj))*h.grow + h.alpha
				evals++
			}
			if math.IsNaN(p) {
				p = math.Inf(1)
			}
			h.shift[j] = p
			switch {
			case p > h.shiftMax:
				h.shiftMax, h.shiftNext, h.argMax = p, h.shiftMax, j
			case p > h.shiftNext:
				h.shiftNext = p
			}
		}
		if k == 1 {
			h.shiftNext = 0
		}
	}
	for j := range h.nearCC {
		h.nearCC[j] = math.Inf(1)
	}
	for i := range k {
		ci := c[i*d : (i+1)*d]
		for j := i + 1; j < k; j++ {
			v := sqDist(ci, c[j*d:(j+1)*d])
			h.nearCC[i] = min(h.nearCC[i], v)
			h.nearCC[j] = min(h.nearCC[j], v)
		}
	}
	evals += int64(k) * int64(k-1) / 2
	for j, v := range h.nearCC {
		s := 0.5*math.Sqrt(v)*h.shrink - h.alpha
		if !(s > 0) { // also NaN
			s = 0
		}
		h.half[j] = s
	}
	copy(h.prev, c)
	h.havePrev = true
	return evals
}

// hamerlyScratch is one worker's space for a chunk in hamerlyPass.
type hamerlyScratch struct {
	label  []int32   // the chunk's new labels
	dist   []float64 // fl(‖x − c_label‖²) where known
	known  []bool
	scan   []int     // rows to scan in full
	rows   []float64 // their features, gathered
	sLabel []int32   // nearestTwoRows's results for them
	sBest  []float64
	sNext  []float64
}

func (sc *hamerlyScratch) grow(m, d int) {
	if cap(sc.label) < m {
		sc.label, sc.dist, sc.known = make([]int32, m), make([]float64, m), make([]bool, m)
		sc.scan, sc.rows = make([]int, 0, m), make([]float64, 0, m*d)
		sc.sLabel, sc.sBest, sc.sNext = make([]int32, m), make([]float64, m), make([]float64, m)
	}
}

// hamerlyPass is lloydRun.pass by Hamerly's method (see hamerlyState): the
// same labels, sums, counts and changed labels, folded in the same order,
// with distances computed only where the bounds cannot prove a row's
// label. Per chunk it first tests every row's bounds, then scans the rows
// that fail in one batch (nearestTwoRows, which uses the vector kernel
// where there is one), then accumulates the rows in row order. The
// inertia is exact only when exact is set (the skipped rows' distances
// are then computed, one per row); otherwise it is the sum over the rows
// whose distance was computed, which no caller reads.
func (r *lloydRun) hamerlyPass(ctx context.Context, c []float64, exact bool) error {
	h := r.ham
	k, d := r.k, r.d
	r.evals += h.prepare(c, k, d)
	if len(h.scratch) < r.workers {
		h.scratch = make([]hamerlyScratch, r.workers)
	}
	red := r.startPass()
	err := eachChunk(ctx, r.src, r.workers, func(w, ci int, rows []float64, first int) error {
		m := len(rows) / d
		if m*d != len(rows) || first+m > len(r.labels) {
			return fmt.Errorf("chunk %d: %d values at row %d do not fit %d rows of %d features", ci, len(rows), first, len(r.labels), d)
		}
		p := red.part()
		p.reset()
		old := r.labels[first : first+m]
		up := h.upper[first : first+m]
		lo := h.lower[first : first+m]
		sc := &h.scratch[w]
		sc.grow(m, d)
		lab, dist, known := sc.label[:m], sc.dist[:m], sc.known[:m]
		scan, gathered := sc.scan[:0], sc.rows[:0]
		grow, shrink, alpha := h.grow, h.shrink, h.alpha

		// Bounds: keep the label or mark the row for a full scan.
		for i, a := range old {
			known[i] = false
			if a >= 0 {
				ub, lb := up[i], lo[i]
				if h.shifted {
					ub = (ub + h.shift[a]) * grow
					q := h.shiftMax
					if int(a) == h.argMax {
						q = h.shiftNext
					}
					if t := lb - q; t > 0 {
						lb = t * shrink
					} else {
						lb = 0
					}
					lo[i] = lb
				}
				bound := max(h.half[a], lb)
				if !(ub*grow+alpha < bound) {
					x := rows[i*d : i*d+d]
					dist[i], known[i] = sqDist(x, c[int(a)*d:int(a)*d+d]), true
					p.evals++
					ub = math.Sqrt(dist[i])*grow + alpha
				}
				up[i] = ub
				if ub*grow+alpha < bound {
					lab[i] = a
					continue
				}
			}
			scan = append(scan, i)
			gathered = append(gathered, rows[i*d:i*d+d]...)
		}

		// Full scans, in one batch.
		if ns := len(scan); ns > 0 {
			sl, sb, ss := sc.sLabel[:ns], sc.sBest[:ns], sc.sNext[:ns]
			nearestTwoRows(sl, sb, ss, c, d, gathered)
			p.evals += int64(ns) * int64(k)
			for q, i := range scan {
				lab[i], dist[i], known[i] = sl[q], sb[q], true
				up[i] = math.Sqrt(sb[q])*grow + alpha
				lb := math.Sqrt(ss[q])*shrink - alpha
				if !(lb > 0) {
					lb = 0
				}
				lo[i] = lb
			}
		}
		sc.scan, sc.rows = scan, gathered

		// Totals, in row order as plain Lloyd's pass.
		for i, a := range lab {
			if old[i] != a {
				p.changed++
				old[i] = a
			}
			x := rows[i*d : i*d+d]
			if exact {
				v := dist[i]
				if !known[i] {
					v = sqDist(x, c[int(a)*d:int(a)*d+d])
					p.evals++
				}
				p.inertia += v
			}
			p.counts[a]++
			s := p.sums[int(a)*d : int(a)*d+d]
			for f, xv := range x {
				s[f] += xv
			}
		}
		red.done(ci, p)
		return nil
	})
	return err
}

// exactInertia sets r.inertia to Σ_i fl(‖x_i − c_{l_i}‖²) for the current
// labels, each term as sqDist computes it (the bits assignRows gives),
// summed in row order within a chunk and the chunk sums in chunk order:
// the inertia plain Lloyd's pass reports for the same labels.
func (r *lloydRun) exactInertia(ctx context.Context, c []float64) error {
	d := r.d
	part := make([]float64, r.src.Chunks())
	err := eachChunk(ctx, r.src, r.workers, func(_, ci int, rows []float64, first int) error {
		m := len(rows) / d
		if m*d != len(rows) || first+m > len(r.labels) {
			return fmt.Errorf("chunk %d: %d values at row %d do not fit %d rows of %d features", ci, len(rows), first, len(r.labels), d)
		}
		var s float64
		for i, l := range r.labels[first : first+m] {
			s += sqDist(rows[i*d:i*d+d], c[int(l)*d:int(l)*d+d])
		}
		part[ci] = s
		return nil
	})
	r.evals += int64(len(r.labels))
	if err != nil {
		return err
	}
	r.inertia = 0
	for _, s := range part {
		r.inertia += s
	}
	return nil
}
