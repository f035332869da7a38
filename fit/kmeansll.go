package fit

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"sync/atomic"
)

// Settings of k-means|| seeding (seedScalable).
const (
	// scalableRounds is R, the number of sampling rounds. Bahmani et al.
	// show that O(log φ₀) rounds suffice in theory and find in their
	// experiments that a few rounds (5) already give seeds as good as
	// k-means++'s (from memory of the paper).
	scalableRounds = 5
	// scalableOversample is ℓ/K: ℓ = 2K rows are expected per round,
	// within the range of factors the paper's experiments use (0.1K to
	// 10K, from memory of the paper).
	scalableOversample = 2
	// scalableMaxRounds bounds the extra rounds run when R rounds left
	// fewer than K candidates.
	scalableMaxRounds = 50
)

// seedScalable chooses K initial centres among the rows of src by
// k-means|| (B. Bahmani, B. Moseley, A. Vattani, R. Kumar and
// S. Vassilvitskii 2012, "Scalable k-means++", Proc. VLDB Endowment 5(7),
// 622–633, Algorithm 2). With C the candidates so far, D(x)² = min_{y∈C}
// ‖x − y‖² and φ = Σ_x D(x)²:
//
//  1. C = {one row drawn uniformly at random};
//  2. for R = 5 rounds: every row x joins C independently with probability
//     min(1, ℓ·D(x)²/φ), ℓ = 2K; then D(x)² and φ are updated with the new
//     candidates;
//  3. each candidate y gets the weight w_y = the number of rows whose
//     nearest candidate it is (the first in C's order on ties);
//  4. the K centres are chosen among the candidates by weighted greedy
//     k-means++ (seedWeighted), with trials draws per centre.
//
// Passes. It reads src R + 1 = 6 times whatever K: once for the distances
// to the first candidate and once per round to update D(x)². The draws
// need only D(x)², kept in memory (closest), and the rows drawn (about ℓ
// per round) are read from the chunks that hold them. Greedy k-means++
// reads src about 2K times. The distances computed, about n·(1 + ℓR) =
// n·(10K + 1), are as many as or more than greedy k-means++'s
// n·(K·(trials + 1) − trials − 1) (measured at K = 8: 78 against 35 per
// row), so on data in memory k-means|| is not faster; the gain is in
// passes, which count when a pass means reading a file or a table.
//
// Determinism. The first row is drawn from rng. The draws of step 2 come
// from one PCG stream per round and chunk, seeded with (s, r·2³² + c),
// where s is one value drawn from rng, r the round and c the chunk
// index: each row's draw does not depend on which worker reads its chunk.
// New candidates are taken in chunk order, then row order, and φ is
// summed per chunk and the chunk sums in chunk order, so the result is the
// same for any number of workers. A row drawn in a round that is at
// squared distance 0 from an earlier draw of the same round is dropped,
// so the candidates are distinct rows and each has weight at least 1.
//
// If R rounds leave fewer than K candidates, rounds continue until there
// are K (at most 50 rounds in all). If φ reaches 0 first, every row equals
// a candidate: the data have fewer than K distinct rows and an error
// wrapping errFewDistinct says so.
//
// closest (n float64) and owner (n int32) are scratch space for D(x)² and
// the index of each row's nearest candidate. It returns the K×D centres
// and the number of distances computed: n per candidate measured against
// all rows, the comparisons among a round's draws, and seedWeighted's.
func seedScalable(ctx context.Context, src Source, lay *chunkLayout, k, trials, workers int, rng *rand.Rand, closest []float64, owner []int32) (centers []float64, evals int64, err error) {
	n, d := src.Len(), src.Dim()
	nc := len(lay.first)
	workers = workerCount(workers)
	if len(closest) != n || len(owner) != n {
		panic(fmt.Sprintf("fit: k-means|| scratch of %d distances and %d owners for %d rows", len(closest), len(owner), n))
	}
	base := rng.Uint64()
	cands := make([]float64, d)
	if err := fetchRow(src, lay, cands, rng.IntN(n)); err != nil {
		return nil, evals, fmt.Errorf("k-means|| seeding: first candidate: %w", err)
	}
	if k == 1 {
		return cands, evals, nil
	}
	chunkPot := make([]float64, nc)
	type scratch struct {
		label []int32
		dist  []float64
	}
	scr := make([]scratch, workers)
	// measure updates D(x)² and owner with the candidates from index from
	// on (all of them when from is 0) and returns the new φ.
	measure := func(from int) (float64, error) {
		fresh := cands[from*d:]
		m := len(fresh) / d
		err := eachChunk(ctx, src, workers, func(w, ci int, rows []float64, start int) error {
			rn := len(rows) / d
			dist, own := closest[start:start+rn], owner[start:start+rn]
			sc := &scr[w]
			if cap(sc.label) < rn {
				sc.label, sc.dist = make([]int32, rn), make([]float64, rn)
			}
			lab, dd := sc.label[:rn], sc.dist[:rn]
			assignRows(lab, dd, fresh, d, rows)
			var s float64
			for i, v := range dd {
				if from == 0 || v < dist[i] {
					dist[i], own[i] = v, int32(from)+lab[i]
				}
				s += dist[i]
			}
			chunkPot[ci] = s
			return nil
		})
		evals += int64(n) * int64(m)
		var phi float64
		for _, s := range chunkPot {
			phi += s
		}
		return phi, err
	}
	phi, err := measure(0)
	if err != nil {
		return nil, evals, fmt.Errorf("k-means|| seeding: first candidate: %w", err)
	}
	ell := float64(scalableOversample * k)
	picks := make([][]int, nc) // per chunk, the rows drawn
	var drawn []int
	var rowsDrawn []float64
	g := rowGather{src: src, lay: lay, d: d}
	for round := 0; ; round++ {
		have := len(cands) / d
		if have >= k && round >= scalableRounds {
			break
		}
		if phi == 0 {
			if have >= k {
				break
			}
			return nil, evals, fmt.Errorf("k-means|| seeding: %w (%d distinct, K = %d)", errFewDistinct, have, k)
		}
		if math.IsNaN(phi) || math.IsInf(phi, 0) {
			return nil, evals, fmt.Errorf("k-means|| seeding: round %d: potential %v is not finite", round+1, phi)
		}
		if err := ctx.Err(); err != nil {
			return nil, evals, fmt.Errorf("k-means|| seeding: round %d: %w", round+1, err)
		}
		if round == scalableMaxRounds {
			return nil, evals, fmt.Errorf("k-means|| seeding: %d candidates after %d rounds, K = %d", have, round, k)
		}
		// The draws need only D², which is in memory: no pass over src.
		eachIndex(nc, workers, func(ci int) {
			crng := rand.New(rand.NewPCG(base, uint64(round)<<32|uint64(ci)))
			start := lay.first[ci]
			got := picks[ci][:0]
			for i, di := range closest[start : start+lay.rows[ci]] {
				// u < ℓ·D²/φ, with u ∈ [0, 1): always true once ℓ·D² ≥ φ.
				if crng.Float64()*phi < ell*di {
					got = append(got, start+i)
				}
			}
			picks[ci] = got
		})
		drawn = drawn[:0]
		for _, got := range picks {
			drawn = append(drawn, got...)
		}
		if cap(rowsDrawn) < len(drawn)*d {
			rowsDrawn = make([]float64, len(drawn)*d)
		}
		rowsDrawn = rowsDrawn[:len(drawn)*d]
		if err := g.gather(rowsDrawn, drawn); err != nil {
			return nil, evals, fmt.Errorf("k-means|| seeding: round %d: %w", round+1, err)
		}
		for q := range drawn {
			y := rowsDrawn[q*d : (q+1)*d]
			dup := false
			for p := have; p < len(cands)/d && !dup; p++ {
				dup = sqDist(y, cands[p*d:(p+1)*d]) == 0
				evals++
			}
			if !dup {
				cands = append(cands, y...)
			}
		}
		if len(cands)/d > have {
			if phi, err = measure(have); err != nil {
				return nil, evals, fmt.Errorf("k-means|| seeding: round %d: measure: %w", round+1, err)
			}
		}
	}
	m := len(cands) / d
	weight := make([]float64, m)
	for _, o := range owner {
		weight[o]++
	}
	centers, wEvals, err := seedWeighted(cands, weight, d, k, trials, rng)
	evals += wEvals
	if err != nil {
		return nil, evals, fmt.Errorf("k-means|| seeding: recluster %d candidates: %w", m, err)
	}
	return centers, evals, nil
}

// eachIndex calls fn(i) for i in [0, n) on up to workers goroutines.
func eachIndex(n, workers int, fn func(i int)) {
	var next atomic.Int64
	var wg sync.WaitGroup
	for range min(workerCount(workers), n) {
		wg.Go(func() {
			for {
				i := int(next.Add(1) - 1)
				if i >= n {
					return
				}
				fn(i)
			}
		})
	}
	wg.Wait()
}

// fetchRow copies row i of src into dst.
func fetchRow(src Source, lay *chunkLayout, dst []float64, i int) error {
	d := len(dst)
	c := lay.chunkOf(i)
	rows, first, err := src.Chunk(c, nil)
	if err != nil {
		return fmt.Errorf("read chunk %d for row %d: %w", c, i, err)
	}
	if i < first || (i-first+1)*d > len(rows) {
		return fmt.Errorf("read chunk %d for row %d: it holds rows %d to %d", c, i, first, first+len(rows)/d-1)
	}
	copy(dst, rows[(i-first)*d:(i-first+1)*d])
	return nil
}

// seedWeighted is greedy k-means++ (as seedGreedy) over m in-memory rows
// x (m×d, row-major) with weights w ≥ 0, the reclustering step of
// k-means||. With D(x)² the squared distance from x to the nearest centre
// chosen so far and φ = Σ_x w_x·D(x)²:
//
//  1. the first centre is a row drawn with probability w_x / Σ w;
//  2. each further centre: draw trials rows independently with
//     probability w_x·D(x)²/φ, compute for each such y the weighted
//     potential φ_y = Σ_x w_x·min(D(x)², ‖x − y‖²) and keep the y with
//     the lowest (the first drawn on ties).
//
// Sums run in row order. A drawn row has w_x·D(x)² > 0, so the centres are
// distinct rows of positive weight; if φ reaches 0 before K centres, an
// error wraps errFewDistinct. It returns the K×d centres and the number
// of distances computed (m per update of D², m·trials per step to rate the
// candidates when trials > 1).
func seedWeighted(x, w []float64, d, k, trials int, rng *rand.Rand) ([]float64, int64, error) {
	m := len(w)
	if len(x) != m*d || trials < 1 || k < 1 {
		panic(fmt.Sprintf("fit: weighted seeding of %d values, %d weights, d %d, K %d, %d trials", len(x), m, d, k, trials))
	}
	var evals int64
	centers := make([]float64, k*d)
	var total float64
	for _, v := range w {
		total += v
	}
	if !(total > 0) || math.IsInf(total, 0) {
		return nil, evals, fmt.Errorf("total weight %v", total)
	}
	i0 := drawIndex(rng.Float64()*total, w)
	copy(centers[:d], x[i0*d:(i0+1)*d])
	dist := make([]float64, m)
	mass := make([]float64, m) // w_x·D(x)²
	update := func(y []float64, first bool) float64 {
		var phi float64
		for i := range m {
			v := sqDist(x[i*d:(i+1)*d], y)
			if first || v < dist[i] {
				dist[i] = v
			}
			mass[i] = w[i] * dist[i]
			phi += mass[i]
		}
		evals += int64(m)
		return phi
	}
	phi := update(centers[:d], true)
	cand := make([]int, trials)
	pot := make([]float64, trials)
	for t := 1; t < k; t++ {
		if phi == 0 {
			return nil, evals, fmt.Errorf("%w (%d distinct, K = %d)", errFewDistinct, t, k)
		}
		if math.IsNaN(phi) || math.IsInf(phi, 0) {
			return nil, evals, fmt.Errorf("centre %d: potential %v is not finite", t+1, phi)
		}
		for q := range cand {
			cand[q] = drawIndex(rng.Float64()*phi, mass)
		}
		best := 0
		if trials > 1 {
			clear(pot)
			for i := range m {
				xi := x[i*d : (i+1)*d]
				for q, c := range cand {
					pot[q] += w[i] * min(dist[i], sqDist(xi, x[c*d:(c+1)*d]))
				}
			}
			evals += int64(m) * int64(trials)
			for q, s := range pot {
				if s < pot[best] {
					best = q
				}
			}
		}
		y := centers[t*d : (t+1)*d]
		copy(y, x[cand[best]*d:(cand[best]+1)*d])
		if t < k-1 {
			phi = update(y, false)
		}
	}
	return centers, evals, nil
}

// drawIndex turns u ∈ [0, Σ mass) into the index whose slice of the
// cumulative sum of mass (in index order) holds u. Only indexes of
// positive mass are returned; if rounding leaves u beyond the last
// cumulative sum, the last index of positive mass is. It panics if no
// mass is positive.
func drawIndex(u float64, mass []float64) int {
	pick := -1
	var acc float64
	for i, v := range mass {
		if v > 0 {
			pick = i
			acc += v
			if u < acc {
				break
			}
		}
	}
	if pick < 0 {
		panic("fit: drawing in proportion to a zero mass")
	}
	return pick
}
