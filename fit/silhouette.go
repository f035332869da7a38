package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"sync/atomic"
)

// DefaultSilhouetteSample is the number of rows Silhouette samples when
// sampleSize is zero. 2000 rows cost 4·10⁶ distance evaluations (tens of
// milliseconds on one core); if the widths have a standard deviation near
// 0.5, the mean of 2000 of them has a standard error near 0.5/√2000 ≈ 0.011,
// ignoring the dependence between widths computed on the same sample.
const DefaultSilhouetteSample = 2000

// silhouetteStream is the second PCG word for Silhouette's sampling stream,
// so that it differs from other streams seeded with the same seed.
const silhouetteStream = 0x73696c686f756574 // "silhouet"

// silhouetteBlock is the number of sample rows a worker takes at a time.
const silhouetteBlock = 32

// Silhouette returns the mean silhouette width (Rousseeuw 1987, J. Comput.
// Appl. Math. 20, 53–65) of the partition labels of src, estimated on a
// uniform sample of rows.
//
// For a row i in cluster A, with δ the Euclidean distance,
//
//	a(i) = mean of δ(i, j) over the other rows j of A,
//	b(i) = min over clusters C ≠ A of the mean of δ(i, j) over rows j of C,
//	s(i) = (b(i) − a(i)) / max(a(i), b(i)),
//
// and the result is the mean of s(i), in [−1, 1]. Following Rousseeuw,
// s(i) = 0 when i is alone in its cluster; also s(i) = 0 when
// max(a, b) = 0 (i and all its neighbours coincide) and when no other
// cluster has a row. With k == 1 no b exists and Silhouette returns 0
// (as does a sample whose rows all fall in one cluster).
//
// Sampling: the mean over all n rows needs n² distances, so Silhouette
// draws m = min(sampleSize, n) distinct rows uniformly without replacement
// (Floyd's algorithm, Bentley & Floyd 1987, Comm. ACM 30(9), 754–757; PCG
// stream from seed) and computes the silhouette of that sample on its own:
// a(i) and b(i) are means over the other sampled rows. This is the usual
// estimate in common practice; it costs one pass over src to collect the
// sample, m·d values of memory and m² distance evaluations. sampleSize 0
// means DefaultSilhouetteSample; when sampleSize ≥ n the value is exact.
//
// labels[i] in [0, k) is the cluster of row i of src (0-based). The work is
// split over workers goroutines (0 means GOMAXPROCS) by sample row; each
// s(i) is computed alone and they are summed in a fixed order, so the
// result does not depend on workers.
//
// Misuse panics: k < 1, sampleSize < 0, len(labels) ≠ src.Len(), a label
// outside [0, k). Data that gives a NaN width (NaN or ±Inf features) is an
// error, as are the source's errors and ctx's.
func Silhouette(ctx context.Context, src Source, labels []int32, k int, sampleSize int, seed uint64, workers int) (float64, error) {
	n, d := src.Len(), src.Dim()
	if k < 1 || sampleSize < 0 {
		panic(fmt.Sprintf("fit: silhouette with k=%d, sample size %d", k, sampleSize))
	}
	if len(labels) != n {
		panic(fmt.Sprintf("fit: silhouette of %d rows with %d labels", n, len(labels)))
	}
	for i, l := range labels {
		if l < 0 || int(l) >= k {
			panic(fmt.Sprintf("fit: silhouette: label %d of row %d outside [0, %d)", l, i, k))
		}
	}
	if k == 1 || n < 2 {
		return 0, nil
	}
	if sampleSize == 0 {
		sampleSize = DefaultSilhouetteSample
	}
	m := min(sampleSize, n)
	rows := silhouetteSampleRows(n, m, seed)

	x := make([]float64, m*d)
	err := eachChunk(ctx, src, workers, func(_, _ int, chunk []float64, first int) error {
		last := first + len(chunk)/d
		p, _ := slices.BinarySearch(rows, first)
		for ; p < m && rows[p] < last; p++ {
			r := rows[p] - first
			copy(x[p*d:(p+1)*d], chunk[r*d:(r+1)*d])
		}
		return nil
	})
	if err != nil {
		return 0, fmt.Errorf("silhouette: collect %d sampled rows: %w", m, err)
	}
	lab := make([]int32, m)
	for p, r := range rows {
		lab[p] = labels[r]
	}
	w, err := silhouetteWidths(ctx, x, lab, d, k, workers)
	if err != nil {
		return 0, fmt.Errorf("silhouette: %w", err)
	}
	var sum float64
	for _, v := range w {
		sum += v
	}
	mean := sum / float64(m)
	if math.IsNaN(mean) {
		return 0, errors.New("silhouette: width is NaN; the sampled rows hold NaN or infinite features")
	}
	return mean, nil
}

// silhouetteSampleRows returns m distinct row indexes drawn uniformly from
// [0, n), sorted ascending, by Floyd's algorithm: for j = n−m, …, n−1 draw
// t uniform in [0, j] and take t, or j if t is already taken. Every m-subset
// is equally likely. With m == n it returns every row without drawing.
func silhouetteSampleRows(n, m int, seed uint64) []int {
	rows := make([]int, 0, m)
	if m == n {
		for i := range n {
			rows = append(rows, i)
		}
		return rows
	}
	rng := rand.New(rand.NewPCG(seed, silhouetteStream))
	taken := make(map[int]struct{}, m)
	for j := n - m; j < n; j++ {
		t := rng.IntN(j + 1)
		if _, dup := taken[t]; dup {
			t = j
		}
		taken[t] = struct{}{}
		rows = append(rows, t)
	}
	slices.Sort(rows)
	return rows
}

// silhouetteWidths returns s(i) for each of the m rows of x (row-major,
// d features) with cluster lab[i] in [0, k), distances taken among these
// rows only. Rows are grouped by cluster first so that each cluster's
// distance sum is one contiguous loop; each s(i) is computed by one
// goroutine in a fixed order, so the values do not depend on workers.
func silhouetteWidths(ctx context.Context, x []float64, lab []int32, d, k, workers int) ([]float64, error) {
	m := len(lab)
	// Counting sort of the rows by cluster: start[c] is the first grouped
	// position of cluster c, order[q] the original position at q.
	start := make([]int, k+1)
	for _, l := range lab {
		start[l+1]++
	}
	for c := range k {
		start[c+1] += start[c]
	}
	next := slices.Clone(start[:k])
	order := make([]int, m)
	xs := make([]float64, m*d)
	for p, l := range lab {
		q := next[l]
		next[l]++
		order[q] = p
		copy(xs[q*d:(q+1)*d], x[p*d:(p+1)*d])
	}

	w := make([]float64, m)
	blocks := (m + silhouetteBlock - 1) / silhouetteBlock
	workers = min(workerCount(workers), blocks)
	var (
		nextBlock atomic.Int64
		wg        sync.WaitGroup
		errOnce   sync.Once
		firstErr  error
	)
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			sums := make([]float64, k)
			for {
				b := int(nextBlock.Add(1) - 1)
				if b >= blocks {
					return
				}
				if err := ctx.Err(); err != nil {
					errOnce.Do(func() { firstErr = err })
					return
				}
				for q := b * silhouetteBlock; q < min((b+1)*silhouetteBlock, m); q++ {
					own := int(lab[order[q]])
					w[order[q]] = silhouetteWidth(sums, xs, start, xs[q*d:(q+1)*d], own, d)
				}
			}
		}()
	}
	wg.Wait()
	if firstErr != nil {
		return nil, firstErr
	}
	return w, nil
}

// silhouetteWidth is s(i) for the row xi of cluster own, given the rows xs
// grouped by cluster (cluster c at positions [start[c], start[c+1])); xi is
// itself one of them and adds a zero distance to its own cluster's sum.
// sums (length k) is scratch space.
func silhouetteWidth(sums, xs []float64, start []int, xi []float64, own, d int) float64 {
	for c := range sums {
		sums[c] = distanceSum(xs, start[c], start[c+1], xi, d)
	}
	size := start[own+1] - start[own]
	if size < 2 {
		return 0
	}
	a := sums[own] / float64(size-1)
	b, other := 0.0, false
	for c, sum := range sums {
		if cnt := start[c+1] - start[c]; c != own && cnt > 0 {
			if mean := sum / float64(cnt); !other || mean < b || math.IsNaN(mean) {
				b = mean
			}
			other = true
		}
	}
	if !other {
		return 0 // no other cluster in the sample
	}
	den := max(a, b)
	if den == 0 {
		return 0
	}
	return (b - a) / den
}

// distanceSum returns Σ_{j=lo}^{hi−1} ‖xi − x_j‖ over rows lo..hi−1 of xs
// (row-major, d features), added in the order of j. Four rows are taken
// at a time with separate accumulators so that their dependency chains
// overlap; each squared distance is still summed over features in order,
// so the value is the same as one row at a time.
func distanceSum(xs []float64, lo, hi int, xi []float64, d int) float64 {
	var sum float64
	j := lo
	for ; j+4 <= hi; j += 4 {
		x0 := xs[j*d:][:len(xi)]
		x1 := xs[(j+1)*d:][:len(xi)]
		x2 := xs[(j+2)*d:][:len(xi)]
		x3 := xs[(j+3)*d:][:len(xi)]
		var s0, s1, s2, s3 float64
		for f, v := range xi {
			t0, t1, t2, t3 := v-x0[f], v-x1[f], v-x2[f], v-x3[f]
			s0 += t0 * t0
			s1 += t1 * t1
			s2 += t2 * t2
			s3 += t3 * t3
		}
		sum += math.Sqrt(s0)
		sum += math.Sqrt(s1)
		sum += math.Sqrt(s2)
		sum += math.Sqrt(s3)
	}
	for ; j < hi; j++ {
		xj := xs[j*d:][:len(xi)]
		var s2 float64
		for f, v := range xi {
			t := v - xj[f]
			s2 += t * t
		}
		sum += math.Sqrt(s2)
	}
	return sum
}
