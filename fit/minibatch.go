package fit

import (
	"context"
	"fmt"
	"math/rand/v2"
	"slices"
	"sync"
)

// Settings of mini-batch k-means (KMeansConfig.Algorithm
// AlgorithmMiniBatch).
const (
	// defaultBatchRows is the batch size b when KMeansConfig.BatchRows
	// is 0.
	defaultBatchRows = 1024
	// miniBatchEpochs and miniBatchCap make the default number of batches
	// min(100·⌈n/b⌉, 10 000).
	miniBatchEpochs = 100
	miniBatchCap    = 10_000
	// miniBatchWindow is W, the number of batches over which the centre
	// shift is measured for the tolerance test.
	miniBatchWindow = 10
	// miniBatchParallelWork is the number of multiply-adds (b·K·d) from
	// which a batch's assignments are split among the workers; below it
	// starting goroutines costs more than it saves.
	miniBatchParallelWork = 1 << 17
)

// defaultMiniBatches is the default number of batches for n rows in
// batches of b: min(100·⌈n/b⌉, 10 000).
func defaultMiniBatches(n, b int) int {
	epochs := (n + b - 1) / b
	if epochs > miniBatchCap/miniBatchEpochs {
		return miniBatchCap
	}
	return max(1, miniBatchEpochs*epochs)
}

// miniBatch runs mini-batch k-means (D. Sculley 2010, "Web-scale k-means
// clustering", Proc. 19th International World Wide Web Conference,
// 1177–1178, Algorithm 1) from the K×D centres c, which it does not
// modify. With v_k the number of rows centre k has absorbed so far
// (initially 0), each batch t:
//
//  1. draws b row numbers uniformly at random with replacement from
//     [0, n) with rng (one IntN per row, in batch order);
//  2. finds each drawn row's nearest centre with the centres as they were
//     at the start of the batch (assignRows; split among workers when
//     b·K·d is large, which changes nothing since each row is independent);
//  3. takes the rows in batch order and moves the centre k of each row x
//     towards it with the per-centre learning rate η = 1/v_k after
//     v_k ← v_k + 1: c_k ← (1 − η)·c_k + η·x, computed as
//     c_k + η·(x − c_k), which leaves c_k exactly unchanged when x = c_k.
//     A centre's first row replaces it (η = 1, copied exactly), and
//     afterwards c_k is the running mean of the rows it has absorbed.
//
// It stops after maxIter batches (stopLimit, not converged), or when the
// centres have moved little over the last W = 10 batches:
// Σ_k ‖c_k(t) − c_k(t−W)‖² ≤ tolAbs, the tolerance plain Lloyd applies to
// one iteration, measured over a window because a single batch's step is
// noisy (stopShift, converged). The window is never shorter than W
// batches. Every random draw comes from rng in a fixed order, so the
// result does not depend on the number of workers.
//
// A final pass of plain Lloyd's assignment (lloydRun.pass) over all rows
// gives the exact sizes and inertia of the returned centres. Mini-batch
// k-means does not re-seed: a centre that no row is nearest to at the end
// (possible only in degenerate data, since every centre starts at a row
// and moves only towards rows) is reported with size 0.
//
// Each batch reads the chunks that hold its rows: nothing for a Dense,
// up to b chunk reads for other sources, so on a source whose chunks are
// expensive a Reservoir sample is the better input, scored afterwards.
// evals counts b·K per batch and n·K for the final pass.
func (r *lloydRun) miniBatch(ctx context.Context, lay *chunkLayout, c []float64, batch, maxIter int, tolAbs float64, rng *rand.Rand) (*lloydOutcome, error) {
	k, d := r.k, r.d
	n := len(r.labels)
	if batch < 1 {
		panic(fmt.Sprintf("fit: mini-batch of %d rows", batch))
	}
	cur := slices.Clone(c)
	absorbed := make([]int64, k) // v_k
	idx := make([]int, batch)
	xb := make([]float64, batch*d)
	lab := make([]int32, batch)
	dist := make([]float64, batch)
	// ring holds the centres after batches t−W+1 … t, slot t mod W; slot
	// 0 starts with the seeds (batch 0).
	ring := make([]float64, miniBatchWindow*k*d)
	copy(ring, cur)
	g := rowGather{src: r.src, lay: lay, d: d}
	out := &lloydOutcome{stop: stopLimit}
	var evals int64
	for out.iterations < maxIter {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		for q := range idx {
			idx[q] = rng.IntN(n)
		}
		if err := g.gather(xb, idx); err != nil {
			return nil, fmt.Errorf("batch %d: %w", out.iterations+1, err)
		}
		assignBatch(lab, dist, cur, d, xb, r.workers)
		evals += int64(batch) * int64(k)
		for q, j := range lab {
			absorbed[j]++
			cj := cur[int(j)*d : int(j)*d+d]
			xq := xb[q*d : q*d+d]
			if absorbed[j] == 1 {
				copy(cj, xq)
				continue
			}
			eta := 1 / float64(absorbed[j])
			for f, v := range xq {
				cj[f] += float64(eta * (v - cj[f]))
			}
		}
		out.iterations++
		t := out.iterations
		slot := ring[(t%miniBatchWindow)*k*d : (t%miniBatchWindow+1)*k*d]
		if t >= miniBatchWindow {
			var shift float64
			for i, v := range cur {
				u := v - slot[i]
				shift += float64(u * u)
			}
			if shift <= tolAbs {
				out.converged, out.stop = true, stopShift
				break
			}
		}
		copy(slot, cur)
	}
	for i := range r.labels {
		r.labels[i] = -1
	}
	r.evals = 0
	if err := r.pass(ctx, cur); err != nil {
		return nil, fmt.Errorf("final assignment: %w", err)
	}
	out.centers = cur
	out.sizes = slices.Clone(r.counts)
	out.inertia = r.inertia
	out.evals = evals + r.evals
	return out, nil
}

// assignBatch is assignRows over the rows of one batch, split into
// contiguous pieces among up to workers goroutines when the batch is
// large enough to pay for them.
func assignBatch(label []int32, dist2 []float64, centers []float64, d int, rows []float64, workers int) {
	b := len(dist2)
	parts := min(workerCount(workers), b)
	if parts <= 1 || b*(len(centers)) < miniBatchParallelWork {
		assignRows(label, dist2, centers, d, rows)
		return
	}
	var wg sync.WaitGroup
	for p := range parts {
		lo, hi := p*b/parts, (p+1)*b/parts
		wg.Go(func() {
			assignRows(label[lo:hi], dist2[lo:hi], centers, d, rows[lo*d:hi*d])
		})
	}
	wg.Wait()
}

// rowGather copies rows of a Source, given by row number, into a batch.
type rowGather struct {
	src   Source
	lay   *chunkLayout
	d     int
	order []int
	buf   []float64
}

// gather copies row idx[q] of g.src into dst[q·d:(q+1)·d] for every q.
// A Dense is read directly; any other source is read chunk by chunk, in
// chunk order, each chunk that holds a wanted row once.
func (g *rowGather) gather(dst []float64, idx []int) error {
	d := g.d
	if m, ok := g.src.(*Dense); ok {
		for q, i := range idx {
			copy(dst[q*d:(q+1)*d], m.X[i*d:(i+1)*d])
		}
		return nil
	}
	g.order = g.order[:0]
	for q := range idx {
		g.order = append(g.order, q)
	}
	slices.SortFunc(g.order, func(a, b int) int { return idx[a] - idx[b] })
	var rows []float64
	lo, hi := 0, 0 // rows [lo, hi) are in rows
	for _, q := range g.order {
		i := idx[q]
		if i < lo || i >= hi {
			c := g.lay.chunkOf(i)
			var first int
			var err error
			rows, first, err = g.src.Chunk(c, g.buf)
			if err != nil {
				return fmt.Errorf("read chunk %d for row %d: %w", c, i, err)
			}
			if cap(rows) > cap(g.buf) {
				g.buf = rows[:0]
			}
			lo, hi = first, first+len(rows)/d
			if i < lo || i >= hi {
				return fmt.Errorf("read chunk %d for row %d: it holds rows %d to %d", c, i, lo, hi-1)
			}
		}
		copy(dst[q*d:(q+1)*d], rows[(i-lo)*d:(i-lo+1)*d])
	}
	return nil
}
