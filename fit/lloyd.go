package fit

import (
	"context"
	"fmt"
	"math"
	"slices"
	"sync"
)

// Nearest returns the index of the centre closest to row, the lowest index
// on ties, and the squared distance to it. centers holds K ≥ 1 centres of d
// features, row-major; row has d features.
//
// The squared distance is ‖x − c‖² = Σ_j (x_j − c_j)², summed from j = 0
// upward with every product rounded before it is added (no fused
// multiply-add), so Nearest, Assign, KMeans's assignments and its inertia
// all see the same bits for the same row and centre.
func Nearest(centers []float64, d int, row []float64) (int, float64) {
	checkCenters(centers, d)
	if len(row) != d {
		panic(fmt.Sprintf("fit: row has %d features, centres %d", len(row), d))
	}
	return nearest(centers, d, row)
}

// Assign writes, for each row of rows (row-major, d features), the index of
// its nearest centre into label and the squared distance into dist2, as
// Nearest does. Either destination may be nil; otherwise it must have one
// element per row.
func Assign(label []int32, dist2 []float64, centers []float64, d int, rows []float64) {
	checkCenters(centers, d)
	if len(rows)%d != 0 {
		panic(fmt.Sprintf("fit: %d values do not make rows of %d features", len(rows), d))
	}
	n := len(rows) / d
	if (label != nil && len(label) != n) || (dist2 != nil && len(dist2) != n) {
		panic(fmt.Sprintf("fit: assign %d rows into %d labels and %d distances", n, len(label), len(dist2)))
	}
	if len(centers)/d > math.MaxInt32 {
		panic(fmt.Sprintf("fit: %d centres do not fit int32 labels", len(centers)/d))
	}
	if label != nil && dist2 != nil {
		assignRows(label, dist2, centers, d, rows)
		return
	}
	// Fill the missing destination block by block from scratch space.
	const block = 256
	var lb [block]int32
	var db [block]float64
	for lo := 0; lo < n; lo += block {
		hi := min(lo+block, n)
		l, s := lb[:hi-lo], db[:hi-lo]
		if label != nil {
			l = label[lo:hi]
		}
		if dist2 != nil {
			s = dist2[lo:hi]
		}
		assignRows(l, s, centers, d, rows[lo*d:hi*d])
	}
}

func checkCenters(centers []float64, d int) {
	if d <= 0 || len(centers) == 0 || len(centers)%d != 0 {
		panic(fmt.Sprintf("fit: %d values do not make one or more centres of %d features", len(centers), d))
	}
}

// sqDist returns ‖x − c‖² = Σ_j (x_j − c_j)², summed from j = 0 upward.
// c must have at least len(x) features.
func sqDist(x, c []float64) float64 {
	c = c[:len(x)]
	var s float64
	for j, v := range x {
		t := v - c[j]
		s += float64(t * t)
	}
	return s
}

// nearest is Nearest without the shape checks.
func nearest(centers []float64, d int, x []float64) (int, float64) {
	var l [1]int32
	var s [1]float64
	assignRows(l[:], s[:], centers, d, x[:d])
	return int(l[0]), s[0]
}

var infBits = math.Float64bits(math.Inf(1))

// takeLess is one step of a running argmin: it returns (s, i) if s < best
// and (best, bi) otherwise, with best carried as raw bits so that the
// choice compiles to integer masking instead of a branch. Which centre is
// nearest is unpredictable, and a mispredicted branch per centre costs more
// than the distance itself when d is small. NaN is never taken.
func takeLess(best uint64, bi int, s float64, i int) (uint64, int) {
	var lt int
	if s < math.Float64frombits(best) {
		lt = 1 // SETcc, not a jump
	}
	m := -lt
	best ^= (best ^ math.Float64bits(s)) & uint64(m)
	bi ^= (bi ^ i) & m
	return best, bi
}

// settle handles a row whose every distance is +Inf or NaN: it reports
// centre 0 and the distance to it.
func settle(best uint64, bi int, x, centers []float64) (float64, int32) {
	if best == infBits {
		return sqDist(x, centers), 0
	}
	return math.Float64frombits(best), int32(bi)
}

// assignRows is the hot loop of every assignment: for each row it finds
// the nearest centre as Nearest defines it and stores label and squared
// distance. Shapes must already be checked and label and dist2 must have
// one element per row. Every kernel sums each distance in feature order
// with products rounded, and scans centres in index order keeping the first
// strict minimum, so all kernels give the same bits; they differ only in
// how much work they expose to the processor at once (measured by
// BenchmarkAssign): four centres per step in general, with the row held in
// registers for d = 2, 4 and 8 (each about 20% faster than the general
// loop).
func assignRows(label []int32, dist2 []float64, centers []float64, d int, rows []float64) {
	switch d {
	case 2:
		assignRows2(label, dist2, centers, rows)
	case 4:
		assignRows4(label, dist2, centers, rows)
	case 8:
		assignRows8(label, dist2, centers, rows)
	default:
		assignRowsN(label, dist2, centers, d, rows)
	}
}

// assignRowsN measures four centres per step, each distance on its own
// accumulator, which gives the processor four independent chains.
func assignRowsN(label []int32, dist2 []float64, centers []float64, d int, rows []float64) {
	k := len(centers) / d
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[i*d : i*d+d]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+4 <= k; j += 4 {
			c0, c1, c2, c3 := c[:len(x)], c[d:d+len(x)], c[2*d:2*d+len(x)], c[3*d:3*d+len(x)]
			c = c[4*d:]
			var s0, s1, s2, s3 float64
			for f, v := range x {
				t0, t1, t2, t3 := v-c0[f], v-c1[f], v-c2[f], v-c3[f]
				s0 += float64(t0 * t0)
				s1 += float64(t1 * t1)
				s2 += float64(t2 * t2)
				s3 += float64(t3 * t3)
			}
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
			best, bi = takeLess(best, bi, s2, j+2)
			best, bi = takeLess(best, bi, s3, j+3)
		}
		for ; j < k; j++ {
			best, bi = takeLess(best, bi, sqDist(x, c), j)
			c = c[d:]
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}

// assignRows2 is assignRowsN for d = 2 with the row in registers.
func assignRows2(label []int32, dist2 []float64, centers []float64, rows []float64) {
	k := len(centers) / 2
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[2*i : 2*i+2 : 2*i+2]
		x0, x1 := x[0], x[1]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+4 <= k; j += 4 {
			cc := c[:8:8]
			c = c[8:]
			t0, t1, t2, t3 := x0-cc[0], x0-cc[2], x0-cc[4], x0-cc[6]
			s0, s1, s2, s3 := float64(t0*t0), float64(t1*t1), float64(t2*t2), float64(t3*t3)
			t0, t1, t2, t3 = x1-cc[1], x1-cc[3], x1-cc[5], x1-cc[7]
			s0, s1, s2, s3 = s0+float64(t0*t0), s1+float64(t1*t1), s2+float64(t2*t2), s3+float64(t3*t3)
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
			best, bi = takeLess(best, bi, s2, j+2)
			best, bi = takeLess(best, bi, s3, j+3)
		}
		for ; j < k; j++ {
			cc := c[:2:2]
			c = c[2:]
			t0, t1 := x0-cc[0], x1-cc[1]
			best, bi = takeLess(best, bi, float64(t0*t0)+float64(t1*t1), j)
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}

// assignRows4 is assignRowsN for d = 4 with the row in registers, two
// centres per step (four would run out of registers).
func assignRows4(label []int32, dist2 []float64, centers []float64, rows []float64) {
	k := len(centers) / 4
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[4*i : 4*i+4 : 4*i+4]
		x0, x1, x2, x3 := x[0], x[1], x[2], x[3]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+2 <= k; j += 2 {
			cc := c[:8:8]
			c = c[8:]
			t0, t1 := x0-cc[0], x0-cc[4]
			s0, s1 := float64(t0*t0), float64(t1*t1)
			t0, t1 = x1-cc[1], x1-cc[5]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x2-cc[2], x2-cc[6]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x3-cc[3], x3-cc[7]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
		}
		if j < k {
			best, bi = takeLess(best, bi, sqDist(x, c), j)
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}

// orderedReduce folds per-chunk partial results into a total in chunk
// order while workers are still running, so that the total does not depend
// on which worker finished first and memory holds only the partials of
// chunks that finished ahead of an earlier one. A worker takes a partial
// with part, fills it for chunk c and hands it back with done(c, p); fold is
// called under a lock, in chunk order, once per chunk.
type orderedReduce[T any] struct {
	mu      sync.Mutex
	next    int
	pending map[int]T
	free    []T
	alloc   func() T
	fold    func(T)
}

func newOrderedReduce[T any](alloc func() T, fold func(T)) *orderedReduce[T] {
	return &orderedReduce[T]{pending: map[int]T{}, alloc: alloc, fold: fold}
}

// part returns a partial for a worker to fill; its contents are stale and
// must be reset by the worker.
func (r *orderedReduce[T]) part() T {
	r.mu.Lock()
	defer r.mu.Unlock()
	if n := len(r.free); n > 0 {
		p := r.free[n-1]
		r.free = r.free[:n-1]
		return p
	}
	return r.alloc()
}

// done hands in the partial of chunk c and folds every partial that is now
// next in chunk order.
func (r *orderedReduce[T]) done(c int, p T) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.pending[c] = p
	for {
		q, ok := r.pending[r.next]
		if !ok {
			return
		}
		delete(r.pending, r.next)
		r.fold(q)
		r.free = append(r.free, q)
		r.next++
	}
}

// lloydPart is one chunk's contribution to an assignment pass.
type lloydPart struct {
	sums    []float64 // K×D coordinate sums per cluster
	counts  []int64   // rows per cluster
	inertia float64   // Σ ‖x − c_label‖² over the chunk's rows
	changed int64     // rows whose label differs from the previous pass
}

// lloydRun holds the state of Lloyd's iterations over one Source; its
// buffers are reused across restarts.
type lloydRun struct {
	src     Source
	k, d    int
	workers int
	labels  []int32 // label of each row from the last pass; −1 before the first

	// Totals of the last pass, reduced in chunk order.
	sums    []float64
	counts  []int64
	inertia float64
	changed int64
	evals   int64 // point–centre distances computed since reset

	scratch []lloydScratch // per worker
}

type lloydScratch struct {
	label []int32
	dist  []float64
}

func newLloydRun(src Source, k, workers int) *lloydRun {
	d := src.Dim()
	workers = workerCount(workers)
	return &lloydRun{
		src: src, k: k, d: d, workers: workers,
		labels:  make([]int32, src.Len()),
		sums:    make([]float64, k*d),
		counts:  make([]int64, k),
		scratch: make([]lloydScratch, workers),
	}
}

// lloydOutcome is how one run of Lloyd's iterations ended.
type lloydOutcome struct {
	centers    []float64 // K×D final centres
	sizes      []int64   // rows per centre in the final assignment
	inertia    float64   // Σ ‖x − c_label‖² for the final assignment
	iterations int
	converged  bool
	stop       string
	reseeded   int
	evals      int64
}

// Reasons a run of Lloyd's iterations stops (KMeansResult.Stop).
const (
	stopUnchanged = "assignments unchanged"
	stopShift     = "centre shift below tolerance"
	stopLimit     = "iteration limit"
)

// lloyd runs Lloyd's iterations (Lloyd 1982, "Least squares quantization
// in PCM", IEEE Trans. Inf. Theory 28(2), 129–137) from the K×D centres c,
// which it does not modify. Iteration t:
//
//  1. assignment: each row x_i gets label l_i = argmin_k ‖x_i − c_k‖²
//     (lowest k on ties), in parallel over chunks; per chunk the coordinate
//     sums S_k = Σ_{l_i=k} x_i, counts N_k, the inertia and the number of
//     changed labels are accumulated and folded in chunk order;
//  2. update: c_k' = S_k / N_k. An empty cluster (N_k = 0) is re-seeded
//     with the row farthest from its own centre (see reseed);
//  3. stop when no label changed (the update then reproduces c bit for
//     bit), or when the total centre shift Σ_k ‖c_k' − c_k‖² ≤ tolAbs, or
//     after maxIter iterations (converged = false only in this case).
//
// After a stop on the shift or the limit one more assignment pass is made
// with the final centres, so that centres, labels, sizes and inertia agree.
func (r *lloydRun) lloyd(ctx context.Context, c []float64, maxIter int, tolAbs float64) (*lloydOutcome, error) {
	k, d := r.k, r.d
	cur := slices.Clone(c)
	next := make([]float64, k*d)
	for i := range r.labels {
		r.labels[i] = -1
	}
	r.evals = 0
	out := &lloydOutcome{stop: stopLimit}
	var empty []int
	for out.iterations < maxIter {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		if err := r.pass(ctx, cur); err != nil {
			return nil, fmt.Errorf("iteration %d: %w", out.iterations+1, err)
		}
		out.iterations++
		empty = empty[:0]
		for j, n := range r.counts {
			if n == 0 {
				empty = append(empty, j)
			}
		}
		if len(empty) > 0 {
			if err := r.reseed(ctx, cur, empty); err != nil {
				return nil, fmt.Errorf("iteration %d: re-seed %d empty clusters: %w", out.iterations, len(empty), err)
			}
			out.reseeded += len(empty)
		}
		var shift float64
		for j := range k {
			n := float64(r.counts[j])
			for f := range d {
				v := r.sums[j*d+f] / n
				t := v - cur[j*d+f]
				shift += t * t
				next[j*d+f] = v
			}
		}
		if r.changed == 0 && len(empty) == 0 && slices.Equal(next, cur) {
			// The pass's counts and inertia belong to cur: no final pass.
			out.converged, out.stop = true, stopUnchanged
			break
		}
		cur, next = next, cur
		if shift <= tolAbs {
			out.converged, out.stop = true, stopShift
			break
		}
	}
	if out.stop != stopUnchanged {
		if err := r.pass(ctx, cur); err != nil {
			return nil, fmt.Errorf("final assignment: %w", err)
		}
	}
	out.centers = cur
	out.sizes = slices.Clone(r.counts)
	out.inertia = r.inertia
	out.evals = r.evals
	return out, nil
}

// pass assigns every row to its nearest centre in c, records the labels,
// and sets r's totals (sums, counts, inertia, changed labels) folded in
// chunk order.
func (r *lloydRun) pass(ctx context.Context, c []float64) error {
	k, d := r.k, r.d
	clear(r.sums)
	clear(r.counts)
	r.inertia, r.changed = 0, 0
	red := newOrderedReduce(
		func() *lloydPart {
			return &lloydPart{sums: make([]float64, k*d), counts: make([]int64, k)}
		},
		func(p *lloydPart) {
			for j, v := range p.sums {
				r.sums[j] += v
			}
			for j, v := range p.counts {
				r.counts[j] += v
			}
			r.inertia += p.inertia
			r.changed += p.changed
		})
	err := eachChunk(ctx, r.src, r.workers, func(w, ci int, rows []float64, first int) error {
		m := len(rows) / d
		if m*d != len(rows) || first+m > len(r.labels) {
			return fmt.Errorf("chunk %d: %d values at row %d do not fit %d rows of %d features", ci, len(rows), first, len(r.labels), d)
		}
		sc := &r.scratch[w]
		if cap(sc.label) < m {
			sc.label, sc.dist = make([]int32, m), make([]float64, m)
		}
		lab, dist := sc.label[:m], sc.dist[:m]
		assignRows(lab, dist, c, d, rows)

		p := red.part()
		clear(p.sums)
		clear(p.counts)
		p.inertia, p.changed = 0, 0
		old := r.labels[first : first+m]
		for i, l := range lab {
			if old[i] != l {
				p.changed++
				old[i] = l
			}
			p.counts[l]++
			p.inertia += dist[i]
			s := p.sums[int(l)*d : int(l)*d+d]
			for f, v := range rows[i*d : i*d+d] {
				s[f] += v
			}
		}
		red.done(ci, p)
		return nil
	})
	r.evals += int64(len(r.labels)) * int64(k)
	return err
}

// reseedCandidate is a row that may re-seed an empty cluster.
type reseedCandidate struct {
	dist2 float64 // squared distance to the centre of its cluster
	row   int
	label int32
	x     []float64
}

// before orders candidates by descending distance, then ascending row.
func (a *reseedCandidate) before(b *reseedCandidate) bool {
	return a.dist2 > b.dist2 || (a.dist2 == b.dist2 && a.row < b.row)
}

// reseed re-seeds the empty clusters (ascending indexes in empty) after a
// pass with centres c. Each empty cluster, in index order, takes the row x
// farthest from the centre of its own cluster (largest ‖x − c_{l(x)}‖²,
// lowest row on ties) among rows not taken yet: x is moved out of its
// cluster's sums (S_l −= x, N_l −= 1) and becomes the new cluster's only
// member (S_k = x, N_k = 1). A row is passed over when taking it would
// empty its own cluster, so several empty clusters get distinct rows and no
// cluster is left empty. The labels of moved rows are not changed; the next
// pass reassigns them.
//
// The candidates are the K farthest rows, which is enough: each of the
// K − m non-empty clusters can cause at most one row to be passed over
// (its last), and m rows must be taken. Every row has distinct coordinates
// from at least one centre when there are at least K distinct rows, which
// seeding guarantees.
func (r *lloydRun) reseed(ctx context.Context, c []float64, empty []int) error {
	k, d := r.k, r.d
	limit := min(k, len(r.labels))
	tops := make([][]reseedCandidate, r.workers)
	err := eachChunk(ctx, r.src, r.workers, func(w, _ int, rows []float64, first int) error {
		top := tops[w]
		for i := range len(rows) / d {
			x := rows[i*d : i*d+d]
			l := r.labels[first+i]
			cand := reseedCandidate{dist2: sqDist(x, c[int(l)*d:int(l)*d+d]), row: first + i, label: l}
			if len(top) == limit && !cand.before(&top[limit-1]) {
				continue
			}
			pos := len(top)
			for pos > 0 && cand.before(&top[pos-1]) {
				pos--
			}
			if len(top) < limit {
				top = append(top, reseedCandidate{})
			}
			copy(top[pos+1:], top[pos:])
			cand.x = slices.Clone(x)
			top[pos] = cand
		}
		tops[w] = top
		return nil
	})
	r.evals += int64(len(r.labels))
	if err != nil {
		return err
	}
	var all []reseedCandidate
	for _, top := range tops {
		all = append(all, top...)
	}
	slices.SortFunc(all, func(a, b reseedCandidate) int {
		switch {
		case a.before(&b):
			return -1
		case b.before(&a):
			return 1
		}
		return 0
	})
	next := 0
	for _, j := range empty {
		for next < len(all) && r.counts[all[next].label] <= 1 {
			next++
		}
		if next == len(all) {
			return fmt.Errorf("no row left to re-seed cluster %d", j)
		}
		cand := &all[next]
		next++
		l := int(cand.label)
		r.counts[l]--
		for f, v := range cand.x {
			r.sums[l*d+f] -= v
		}
		r.counts[j] = 1
		copy(r.sums[j*d:j*d+d], cand.x)
	}
	return nil
}

// assignRows8 is assignRowsN for d = 8 with the row in registers, two
// centres per step.
func assignRows8(label []int32, dist2 []float64, centers []float64, rows []float64) {
	k := len(centers) / 8
	label = label[:len(dist2)]
	for i := range dist2 {
		x := rows[8*i : 8*i+8 : 8*i+8]
		x0, x1, x2, x3, x4, x5, x6, x7 := x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7]
		best, bi := infBits, 0
		c := centers
		j := 0
		for ; j+2 <= k; j += 2 {
			cc := c[:16:16]
			c = c[16:]
			t0, t1 := x0-cc[0], x0-cc[8]
			s0, s1 := float64(t0*t0), float64(t1*t1)
			t0, t1 = x1-cc[1], x1-cc[9]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x2-cc[2], x2-cc[10]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x3-cc[3], x3-cc[11]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x4-cc[4], x4-cc[12]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x5-cc[5], x5-cc[13]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x6-cc[6], x6-cc[14]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			t0, t1 = x7-cc[7], x7-cc[15]
			s0, s1 = s0+float64(t0*t0), s1+float64(t1*t1)
			best, bi = takeLess(best, bi, s0, j)
			best, bi = takeLess(best, bi, s1, j+1)
		}
		if j < k {
			best, bi = takeLess(best, bi, sqDist(x, c), j)
		}
		dist2[i], label[i] = settle(best, bi, x, centers)
	}
}
