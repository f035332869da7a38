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

// nearest is Nearest without the shape checks.
func nearest(centers []float64, d int, x []float64) (int, float64) {
	var l [1]int32
	var s [1]float64
	assignRows(l[:], s[:], centers, d, x[:d])
	return int(l[0]), s[0]
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
	evals   int64     // point–centre distances computed (Hamerly's passes)
}

// reset zeroes p for a new chunk.
func (p *lloydPart) reset() {
	clear(p.sums)
	clear(p.counts)
	p.inertia, p.changed, p.evals = 0, 0, 0
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
	evals   int64 // distances computed since reset

	scratch []lloydScratch // per worker

	// ham, when set, makes every pass Hamerly's (hamerly.go): the same
	// labels, sums and counts as plain Lloyd's from fewer distances.
	ham *hamerlyState

	// progress, when set, is told of every iteration.
	progress func(iteration int, objective float64)
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
//
// With r.ham set the assignment passes are Hamerly's (hamerlyPass), which
// give the same labels, sums and counts bit for bit while skipping the
// distances that bounds prove unnecessary; everything else, re-seeding
// and stopping included, is shared, so the outcome differs from plain
// Lloyd's only in evals.
func (r *lloydRun) lloyd(ctx context.Context, c []float64, maxIter int, tolAbs float64) (*lloydOutcome, error) {
	k, d := r.k, r.d
	cur := slices.Clone(c)
	next := make([]float64, k*d)
	for i := range r.labels {
		r.labels[i] = -1
	}
	r.evals = 0
	if r.ham != nil {
		r.ham.reset()
	}
	out := &lloydOutcome{stop: stopLimit}
	var empty []int
	for out.iterations < maxIter {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		if err := r.assign(ctx, cur, false); err != nil {
			return nil, fmt.Errorf("iteration %d: %w", out.iterations+1, err)
		}
		out.iterations++
		if r.progress != nil {
			obj := r.inertia
			if r.ham != nil {
				obj = math.NaN() // bounds skipped rows; exact only at the end
			}
			r.progress(out.iterations, obj)
		}
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
		if err := r.assign(ctx, cur, true); err != nil {
			return nil, fmt.Errorf("final assignment: %w", err)
		}
	} else if r.ham != nil {
		// Hamerly's last pass skipped the distances its bounds made
		// unnecessary; the inertia needs every row's.
		if err := r.exactInertia(ctx, cur); err != nil {
			return nil, fmt.Errorf("final inertia: %w", err)
		}
	}
	out.centers = cur
	out.sizes = slices.Clone(r.counts)
	out.inertia = r.inertia
	out.evals = r.evals
	return out, nil
}

// assign makes one assignment pass with centres c: Hamerly's when r.ham is
// set (final asks it for the exact inertia), plain Lloyd's otherwise.
func (r *lloydRun) assign(ctx context.Context, c []float64, final bool) error {
	if r.ham != nil {
		return r.hamerlyPass(ctx, c, final)
	}
	return r.pass(ctx, c)
}

// startPass clears r's totals and returns the reduction that folds the
// chunks' lloydParts into them in chunk order.
func (r *lloydRun) startPass() *orderedReduce[*lloydPart] {
	k, d := r.k, r.d
	clear(r.sums)
	clear(r.counts)
	r.inertia, r.changed = 0, 0
	return newOrderedReduce(
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
			r.evals += p.evals
		})
}

// pass assigns every row to its nearest centre in c, records the labels,
// and sets r's totals (sums, counts, inertia, changed labels) folded in
// chunk order.
func (r *lloydRun) pass(ctx context.Context, c []float64) error {
	k, d := r.k, r.d
	red := r.startPass()
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
		p.reset()
		old := r.labels[first : first+m]
		for i, l := range lab {
			if old[i] != l {
				p.changed++
				old[i] = l
			}
			p.counts[l]++
			p.inertia += dist[i]
		}
		addToSums(p.sums, lab, rows, d)
		red.done(ci, p)
		return nil
	})
	r.evals += int64(len(r.labels)) * int64(k)
	return err
}

// addToSums adds each row x_i of rows (row-major, d features) to its
// cluster's sums, sums[l_i·d : (l_i+1)·d], the rows in order, so every
// sum is the same whatever the unrolling. Eight features, the common
// case the assignment kernels also unroll, get a loop without bounds
// checks.
func addToSums(sums []float64, label []int32, rows []float64, d int) {
	if d == 8 {
		for i, l := range label {
			s := (*[8]float64)(sums[int(l)*8:])
			x := (*[8]float64)(rows[i*8:])
			s[0] += x[0]
			s[1] += x[1]
			s[2] += x[2]
			s[3] += x[3]
			s[4] += x[4]
			s[5] += x[5]
			s[6] += x[6]
			s[7] += x[7]
		}
		return
	}
	for i, l := range label {
		s := sums[int(l)*d : int(l)*d+d]
		for f, v := range rows[i*d : i*d+d] {
			s[f] += v
		}
	}
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
