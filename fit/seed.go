package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
)

// errFewDistinct reports that the data hold fewer distinct rows than the
// number of clusters asked for.
var errFewDistinct = errors.New("fewer distinct rows than clusters")

// defaultTrials is the number of candidates greedy k-means++ draws per
// step when none is configured: 2 + ⌊ln K⌋ (Arthur and Vassilvitskii 2007,
// section 6; common practice).
func defaultTrials(k int) int {
	return 2 + int(math.Log(float64(k)))
}

// seedCenters picks K centres from the rows of src by greedy k-means++
// (see seedGreedy) with randomness from rng; trials ≤ 0 means 2 + ⌊ln K⌋.
// It is the entry point for other fitting routines that want k-means++
// starts without running Lloyd's iterations.
func seedCenters(ctx context.Context, src Source, k, trials, workers int, rng *rand.Rand) ([]float64, error) {
	if k < 1 || k > src.Len() {
		return nil, fmt.Errorf("k-means++ seeding: K = %d for %d rows", k, src.Len())
	}
	sum, err := summarize(ctx, src, workers)
	if err != nil {
		return nil, fmt.Errorf("k-means++ seeding: %w", err)
	}
	if trials <= 0 {
		trials = defaultTrials(k)
	}
	c, _, err := seedGreedy(ctx, src, &sum.chunkLayout, k, trials, workers, rng, make([]float64, src.Len()))
	return c, err
}

// seedGreedy chooses K initial centres among the rows of src by greedy
// k-means++ (Arthur and Vassilvitskii 2007, "k-means++: the advantages of
// careful seeding", Proc. 18th ACM-SIAM SODA, 1027–1035; the greedy variant
// is described in their section 6). With D(x)² the squared distance from
// row x to the nearest centre chosen so far and φ = Σ_x D(x)² the
// potential:
//
//  1. the first centre is a row drawn uniformly at random;
//  2. each further centre: draw trials candidate rows independently with
//     P(x) = D(x)²/φ, compute for each candidate y the potential
//     φ_y = Σ_x min(D(x)², ‖x − y‖²) it would leave, and keep the candidate
//     with the lowest φ_y (lowest draw on ties).
//
// D(x)² is kept per row in closest (len n, so 8n bytes). Each potential is
// summed per chunk in row order and the chunk sums added in chunk order, so
// the result is the same for any number of workers. A draw u ∈ [0, φ) is
// turned into a row by walking the chunk sums to the chunk whose cumulative
// range holds u and then that chunk's D(x)² (sampleRow).
//
// A drawn row always has D(x)² > 0, so the centres are distinct rows. If φ
// reaches 0 after t < K centres, every row equals one of them: the data
// have exactly t distinct rows, and an error wrapping errFewDistinct says
// so. (Rows so close that their squared distance underflows to 0 count as
// equal.)
//
// It returns the K×D centres and the number of point–centre distances
// computed: for K > 1, n to measure D(x)² from the first centre, then per
// further centre n·trials to rate the candidates (skipped when trials = 1)
// and n to update D(x)² (skipped after the last centre); 0 for K = 1.
func seedGreedy(ctx context.Context, src Source, lay *chunkLayout, k, trials, workers int, rng *rand.Rand, closest []float64) (centers []float64, evals int64, err error) {
	n, d := src.Len(), src.Dim()
	nc := len(lay.first)
	workers = workerCount(workers)
	centers = make([]float64, k*d)
	chunkPot := make([]float64, nc)
	candPot := make([]float64, nc*trials)
	cand := make([]float64, trials*d)
	scratch := make([][]float64, workers) // per-worker candidate potentials
	for w := range scratch {
		scratch[w] = make([]float64, trials)
	}
	var buf []float64
	fetch := func(dst []float64, row int) error {
		c := lay.chunkOf(row)
		rows, first, err := src.Chunk(c, buf)
		if err != nil {
			return fmt.Errorf("read chunk %d for row %d: %w", c, row, err)
		}
		if cap(rows) > cap(buf) {
			buf = rows[:0]
		}
		copy(dst, rows[(row-first)*d:(row-first+1)*d])
		return nil
	}
	// update sets D(x)² = min(D(x)², ‖x − y‖²) (or ‖x − y‖² when first)
	// and returns the new potential.
	update := func(y []float64, first bool) (float64, error) {
		err := eachChunk(ctx, src, workers, func(_, ci int, rows []float64, start int) error {
			dist := closest[start : start+len(rows)/d]
			var s float64
			for i := range dist {
				v := sqDist(rows[i*d:i*d+d], y)
				if first || v < dist[i] {
					dist[i] = v
				}
				s += dist[i]
			}
			chunkPot[ci] = s
			return nil
		})
		evals += int64(n)
		var total float64
		for _, s := range chunkPot {
			total += s
		}
		return total, err
	}

	if err := fetch(centers[:d], rng.IntN(n)); err != nil {
		return nil, evals, fmt.Errorf("k-means++ seeding: centre 1: %w", err)
	}
	if k == 1 {
		return centers, evals, nil
	}
	phi, err := update(centers[:d], true)
	if err != nil {
		return nil, evals, fmt.Errorf("k-means++ seeding: centre 1: %w", err)
	}
	for t := 1; t < k; t++ {
		if phi == 0 {
			return nil, evals, fmt.Errorf("k-means++ seeding: %w (%d distinct, K = %d)", errFewDistinct, t, k)
		}
		if math.IsNaN(phi) || math.IsInf(phi, 0) {
			return nil, evals, fmt.Errorf("k-means++ seeding: centre %d: potential %v is not finite", t+1, phi)
		}
		for q := range trials {
			row := sampleRow(rng.Float64()*phi, chunkPot, lay, closest)
			if err := fetch(cand[q*d:(q+1)*d], row); err != nil {
				return nil, evals, fmt.Errorf("k-means++ seeding: centre %d: %w", t+1, err)
			}
		}
		best := 0
		if trials > 1 {
			err := eachChunk(ctx, src, workers, func(w, ci int, rows []float64, start int) error {
				pot := scratch[w]
				clear(pot)
				rateCandidates(pot, cand, d, rows, closest[start:start+len(rows)/d])
				copy(candPot[ci*trials:(ci+1)*trials], pot)
				return nil
			})
			evals += int64(n) * int64(trials)
			if err != nil {
				return nil, evals, fmt.Errorf("k-means++ seeding: centre %d: rate candidates: %w", t+1, err)
			}
			phis := make([]float64, trials)
			for ci := range nc {
				for q, s := range candPot[ci*trials : (ci+1)*trials] {
					phis[q] += s
				}
			}
			for q, s := range phis {
				if s < phis[best] {
					best = q
				}
			}
		}
		y := centers[t*d : (t+1)*d]
		copy(y, cand[best*d:(best+1)*d])
		if t == k-1 {
			break
		}
		if phi, err = update(y, false); err != nil {
			return nil, evals, fmt.Errorf("k-means++ seeding: centre %d: %w", t+1, err)
		}
	}
	return centers, evals, nil
}

// rateCandidates adds Σ_i min(D(x_i)², ‖x_i − y_q‖²) over the rows x_i of
// one chunk (D² in closest) to pot[q] for every candidate y_q in cand
// (len(pot) candidates of d features). Four candidates are measured per
// step on separate accumulators, each distance summed in feature order as
// sqDist does, and each pot[q] accumulates in row order.
func rateCandidates(pot, cand []float64, d int, rows, closest []float64) {
	tr := len(pot)
	for i, di := range closest {
		x := rows[i*d : i*d+d]
		c := cand
		q := 0
		for ; q+4 <= tr; q += 4 {
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
			p := pot[q : q+4 : q+4]
			p[0] += min(s0, di)
			p[1] += min(s1, di)
			p[2] += min(s2, di)
			p[3] += min(s3, di)
		}
		for ; q < tr; q++ {
			pot[q] += min(sqDist(x, c), di)
			c = c[d:]
		}
	}
}

// sampleRow turns u ∈ [0, φ), φ = Σ chunkPot, into the row whose slice of
// the cumulative sum of D(x)² (closest, in row order) holds u: first the
// chunk, walking the chunk sums in chunk order, then the row within it.
// Only rows with D(x)² > 0 can be returned; if rounding leaves u beyond the
// last cumulative sum, the last such row of the chunk (or of the last chunk
// with a positive sum) is returned. It panics if no chunk sum is positive.
func sampleRow(u float64, chunkPot []float64, lay *chunkLayout, closest []float64) int {
	c, base := -1, 0.0
	var acc float64
	for ci, p := range chunkPot {
		if p > 0 {
			c, base = ci, acc
			if u < acc+p {
				break
			}
		}
		acc += p
	}
	if c < 0 {
		panic("fit: sampling rows in proportion to a zero potential")
	}
	first := lay.first[c]
	return first + drawIndex(u-base, closest[first:first+lay.rows[c]])
}
