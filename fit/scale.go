package fit

import (
	"context"
	"fmt"
	"math"
	"math/bits"
	"slices"
	"sort"
)

// Scaling maps every feature x_j to (x_j − Center_j) / Spread_j, so that
// features measured in different units weigh alike in a distance. It is
// fitted once (FitScaling), applied before a fit (Apply) and undone when
// reporting centres and other location parameters (Invert).
type Scaling struct {
	// Method is "none", "standard" or "robust".
	Method string
	// Center is subtracted from each feature.
	Center []float64
	// Spread divides each feature after centring; never zero.
	Spread []float64
}

// Scaling methods accepted by FitScaling.
const (
	scaleNone     = "none"
	scaleStandard = "standard"
	scaleRobust   = "robust"
)

// FitScaling computes a Scaling of the features of src by method:
//
//   - "none": Center_j = 0 and Spread_j = 1; the data are not read and
//     constant is nil.
//   - "standard": Center_j = x̄_j = (1/n) Σ_i x_ij and Spread_j = s_j, the
//     population standard deviation s_j = sqrt((1/n) Σ_i (x_ij − x̄_j)²)
//     (ddof 0). Means and sums of squared deviations are computed per chunk
//     and merged in chunk order with the pairwise update of Chan, Golub and
//     LeVeque (1983), "Algorithms for computing the sample variance", The
//     American Statistician 37(3), 242–247, which avoids the cancellation of
//     Σx² − n x̄².
//   - "robust": Center_j = the median and Spread_j = the interquartile range
//     Q3 − Q1 of feature j, where the p-quantile of the sorted values
//     x_(0) ≤ … ≤ x_(n−1) is x_(h) + (h − ⌊h⌋)(x_(⌊h⌋+1) − x_(h)) with
//     h = (n − 1)p, ⌊h⌋ written (h) in the first term (linear
//     interpolation between order statistics, common practice; Hyndman and
//     Fan (1996) type 7). Each feature is copied into one buffer of n values
//     and its order statistics found by selection, so this needs O(n) extra
//     memory (8n bytes, reused across features) and O(n) expected time per
//     feature.
//
// A feature whose spread is zero (a constant feature; for "robust" also one
// whose middle half is constant) keeps Spread_j = 1, so Apply only shifts
// it; the indexes of such features are returned in constant, ascending, for
// the caller to warn about. For a constant feature under "standard" the
// centre is the feature's value itself.
//
// The data are read on GOMAXPROCS goroutines; the result does not depend
// on their number.
//
// Errors: an unknown method, a source without rows, a non-finite value
// (named by row and feature, both 0-based), a source error or ctx's error.
func FitScaling(ctx context.Context, src Source, method string) (s Scaling, constant []int, err error) {
	d := src.Dim()
	s.Method = method
	switch method {
	case scaleNone:
		s.Center = make([]float64, d)
		s.Spread = make([]float64, d)
		for j := range s.Spread {
			s.Spread[j] = 1
		}
		return s, nil, nil
	case scaleStandard, scaleRobust:
	default:
		return Scaling{}, nil, fmt.Errorf("fit scaling: unknown method %q; want %q, %q or %q", method, scaleNone, scaleStandard, scaleRobust)
	}
	sum, err := summarize(ctx, src, 0)
	if err != nil {
		return Scaling{}, nil, fmt.Errorf("fit %s scaling: %w", method, err)
	}
	if sum.n == 0 {
		return Scaling{}, nil, fmt.Errorf("fit %s scaling: no rows", method)
	}
	s.Center = make([]float64, d)
	s.Spread = make([]float64, d)
	if method == scaleStandard {
		for j := range d {
			s.Center[j] = sum.mean[j]
			s.Spread[j] = math.Sqrt(sum.m2[j] / float64(sum.n))
			if sum.min[j] == sum.max[j] {
				s.Center[j] = sum.min[j]
				s.Spread[j] = 0
			}
		}
	} else {
		col := make([]float64, sum.n)
		for j := range d {
			if err := copyColumn(ctx, col, src, j); err != nil {
				return Scaling{}, nil, fmt.Errorf("fit robust scaling: feature %d: %w", j, err)
			}
			q := quantilesInPlace(col, 0.25, 0.5, 0.75)
			s.Center[j] = q[1]
			s.Spread[j] = q[2] - q[0]
		}
	}
	for j := range d {
		if s.Spread[j] == 0 {
			s.Spread[j] = 1
			constant = append(constant, j)
		}
	}
	return s, constant, nil
}

// Apply writes the scaled rows of src, (x_ij − Center_j) / Spread_j, into
// dst. Both hold whole rows of len(s.Center) features, row-major; dst may
// be src. It panics if the shapes do not match.
func (s Scaling) Apply(dst, src []float64) {
	d := s.check(dst, src)
	for i := 0; i < len(src); i += d {
		x, y := src[i:i+d], dst[i:i+d]
		for j, c := range s.Center[:d] {
			y[j] = (x[j] - c) / s.Spread[j]
		}
	}
}

// Invert undoes Apply: it writes z_ij · Spread_j + Center_j into dst, which
// may be src. Invert(Apply(x)) equals x up to rounding (a few ulps).
func (s Scaling) Invert(dst, src []float64) {
	d := s.check(dst, src)
	for i := 0; i < len(src); i += d {
		x, y := src[i:i+d], dst[i:i+d]
		for j, c := range s.Center[:d] {
			y[j] = x[j]*s.Spread[j] + c
		}
	}
}

func (s Scaling) check(dst, src []float64) int {
	d := len(s.Center)
	if d == 0 || len(s.Spread) != d {
		panic(fmt.Sprintf("fit: scaling has %d centres and %d spreads", d, len(s.Spread)))
	}
	if len(dst) != len(src) || len(src)%d != 0 {
		panic(fmt.Sprintf("fit: scaling %d features: dst has %d values, src %d", d, len(dst), len(src)))
	}
	return d
}

// Spreads returns each feature's population standard deviation
// s_j = sqrt((1/n) Σ_i (x_ij − x̄_j)²), computed as in FitScaling's
// "standard" method, on up to workers goroutines (0 means GOMAXPROCS). The
// caller uses it to warn when features' spreads differ by orders of
// magnitude. A constant feature has spread exactly 0.
func Spreads(ctx context.Context, src Source, workers int) ([]float64, error) {
	sum, err := summarize(ctx, src, workers)
	if err != nil {
		return nil, fmt.Errorf("feature spreads: %w", err)
	}
	if sum.n == 0 {
		return nil, fmt.Errorf("feature spreads: no rows")
	}
	out := make([]float64, len(sum.m2))
	for j, m2 := range sum.m2 {
		if sum.min[j] != sum.max[j] {
			out[j] = math.Sqrt(m2 / float64(sum.n))
		}
	}
	return out, nil
}

// chunkLayout records where each chunk of a Source starts and how many rows
// it holds, learned in a first pass so that later passes can find the chunk
// that holds a given row and index per-row buffers by row.
type chunkLayout struct {
	first []int // first[c] is the index of chunk c's first row
	rows  []int // rows[c] is the number of rows in chunk c
}

// chunkOf returns the chunk holding row i.
func (l *chunkLayout) chunkOf(i int) int {
	c := sort.Search(len(l.first), func(c int) bool { return l.first[c]+l.rows[c] > i })
	if c == len(l.first) {
		panic(fmt.Sprintf("fit: row %d beyond the last chunk", i))
	}
	return c
}

// featureSummary holds the chunk layout of a Source and, per feature j, the
// mean, the sum of squared deviations m2_j = Σ_i (x_ij − x̄_j)², the minimum
// and the maximum.
type featureSummary struct {
	chunkLayout
	n                  int
	mean, m2, min, max []float64
}

// variances returns m2_j / n for every feature (population variances).
func (s *featureSummary) variances() []float64 {
	v := make([]float64, len(s.m2))
	for j, m2 := range s.m2 {
		if s.n > 0 {
			v[j] = m2 / float64(s.n)
		}
	}
	return v
}

// summaryPart is one chunk's contribution to a featureSummary.
type summaryPart struct {
	n                  int
	mean, m2, min, max []float64
}

// summaryBlock is how many rows add takes at a time: few enough to stay in
// the first-level cache while it goes through them once per group of
// features.
const summaryBlock = 256

// add sets p to the summary of rows (row-major, d features each): the
// count, the mean, the sum of squared deviations from that mean, the
// minimum and the maximum of every feature. Each feature's sums run over
// the rows in order. Features are taken four at a time, block by block of
// rows, so that the four running sums stay in registers.
func (p *summaryPart) add(rows []float64, d int) {
	m := len(rows) / d
	p.n = m
	mean, m2, lo, hi := p.mean[:d], p.m2[:d], p.min[:d], p.max[:d]
	clear(mean)
	clear(m2)
	for j := range d {
		lo[j], hi[j] = math.Inf(1), math.Inf(-1)
	}
	step := summaryBlock * d
	for b := 0; b < len(rows); b += step {
		blk := rows[b:min(b+step, len(rows))]
		j := 0
		for ; j+4 <= d; j += 4 {
			s0, s1, s2, s3 := mean[j], mean[j+1], mean[j+2], mean[j+3]
			for i := j; i+4 <= len(blk); i += d {
				x := blk[i : i+4 : i+4]
				s0 += x[0]
				s1 += x[1]
				s2 += x[2]
				s3 += x[3]
			}
			mean[j], mean[j+1], mean[j+2], mean[j+3] = s0, s1, s2, s3
		}
		for ; j < d; j++ {
			s := mean[j]
			for i := j; i < len(blk); i += d {
				s += blk[i]
			}
			mean[j] = s
		}
	}
	for j := range mean {
		mean[j] /= float64(max(m, 1))
	}
	for b := 0; b < len(rows); b += step {
		blk := rows[b:min(b+step, len(rows))]
		j := 0
		for ; j+4 <= d; j += 4 {
			c := mean[j : j+4 : j+4]
			q0, q1, q2, q3 := m2[j], m2[j+1], m2[j+2], m2[j+3]
			l0, l1, l2, l3 := lo[j], lo[j+1], lo[j+2], lo[j+3]
			h0, h1, h2, h3 := hi[j], hi[j+1], hi[j+2], hi[j+3]
			for i := j; i+4 <= len(blk); i += d {
				x := blk[i : i+4 : i+4]
				t0, t1, t2, t3 := x[0]-c[0], x[1]-c[1], x[2]-c[2], x[3]-c[3]
				q0 += t0 * t0
				q1 += t1 * t1
				q2 += t2 * t2
				q3 += t3 * t3
				l0, l1, l2, l3 = min(l0, x[0]), min(l1, x[1]), min(l2, x[2]), min(l3, x[3])
				h0, h1, h2, h3 = max(h0, x[0]), max(h1, x[1]), max(h2, x[2]), max(h3, x[3])
			}
			m2[j], m2[j+1], m2[j+2], m2[j+3] = q0, q1, q2, q3
			lo[j], lo[j+1], lo[j+2], lo[j+3] = l0, l1, l2, l3
			hi[j], hi[j+1], hi[j+2], hi[j+3] = h0, h1, h2, h3
		}
		for ; j < d; j++ {
			c, q, l, h := mean[j], m2[j], lo[j], hi[j]
			for i := j; i < len(blk); i += d {
				v := blk[i]
				t := v - c
				q += t * t
				l = min(l, v)
				h = max(h, v)
			}
			m2[j], lo[j], hi[j] = q, l, h
		}
	}
}

// summarize reads src once: it records the chunk layout, checks that the
// chunks tile rows 0..n−1 in order and that every value is finite, and
// computes per-feature means, sums of squared deviations, minima and maxima.
// Within a chunk the mean is found first and the squared deviations summed
// around it (two passes over cached rows); chunks are merged in chunk order
// by Chan, Golub and LeVeque's update
//
//	n = n_a + n_b, δ = x̄_b − x̄_a, x̄ = x̄_a + δ n_b/n, m2 = m2_a + m2_b + δ² n_a n_b / n,
//
// so the result is the same for any number of workers.
func summarize(ctx context.Context, src Source, workers int) (*featureSummary, error) {
	d, nc := src.Dim(), src.Chunks()
	if d <= 0 {
		panic(fmt.Sprintf("fit: source has %d features", d))
	}
	s := &featureSummary{
		chunkLayout: chunkLayout{first: make([]int, nc), rows: make([]int, nc)},
		mean:        make([]float64, d),
		m2:          make([]float64, d),
		min:         make([]float64, d),
		max:         make([]float64, d),
	}
	for j := range d {
		s.min[j], s.max[j] = math.Inf(1), math.Inf(-1)
	}
	red := newOrderedReduce(
		func() *summaryPart {
			return &summaryPart{mean: make([]float64, d), m2: make([]float64, d), min: make([]float64, d), max: make([]float64, d)}
		},
		func(p *summaryPart) {
			if p.n == 0 {
				return
			}
			na, nb := float64(s.n), float64(p.n)
			n := na + nb
			for j := range d {
				delta := p.mean[j] - s.mean[j]
				s.mean[j] += delta * (nb / n)
				s.m2[j] += p.m2[j] + delta*delta*(na*nb/n)
				s.min[j] = min(s.min[j], p.min[j])
				s.max[j] = max(s.max[j], p.max[j])
			}
			s.n += p.n
		})
	err := eachChunk(ctx, src, workers, func(_, c int, rows []float64, first int) error {
		if len(rows)%d != 0 {
			return fmt.Errorf("chunk %d: %d values do not make rows of %d features", c, len(rows), d)
		}
		m := len(rows) / d
		s.first[c], s.rows[c] = first, m
		p := red.part()
		p.add(rows, d)
		for j := range d {
			if math.IsInf(p.m2[j], 0) || math.IsNaN(p.m2[j]) || math.IsInf(p.mean[j], 0) || math.IsNaN(p.mean[j]) {
				for i := 0; i < len(rows); i++ {
					if v := rows[i]; math.IsNaN(v) || math.IsInf(v, 0) {
						return fmt.Errorf("chunk %d: row %d, feature %d: value %v is not finite", c, first+i/d, i%d, v)
					}
				}
				// Finite values whose squares overflow.
				return fmt.Errorf("chunk %d: feature %d: values too large to square", c, j)
			}
		}
		red.done(c, p)
		return nil
	})
	if err != nil {
		return nil, err
	}
	next := 0
	for c := range nc {
		if s.first[c] != next {
			return nil, fmt.Errorf("chunk %d starts at row %d, want %d", c, s.first[c], next)
		}
		next += s.rows[c]
	}
	if next != src.Len() {
		return nil, fmt.Errorf("chunks hold %d rows, source says %d", next, src.Len())
	}
	return s, nil
}

// copyColumn writes feature j of every row of src into dst (len n).
func copyColumn(ctx context.Context, dst []float64, src Source, j int) error {
	d := src.Dim()
	return eachChunk(ctx, src, 0, func(_, _ int, rows []float64, first int) error {
		out := dst[first : first+len(rows)/d]
		for i := range out {
			out[i] = rows[i*d+j]
		}
		return nil
	})
}

// quantilesInPlace returns the p-quantiles of x for each p in ps (ascending,
// in [0, 1]) with linear interpolation between order statistics
// (Hyndman–Fan type 7), reordering x. The needed order statistics are found
// by selection from the smallest up, each in the suffix left by the last, in
// O(n) expected time.
func quantilesInPlace(x []float64, ps ...float64) []float64 {
	n := len(x)
	if n == 0 {
		panic("fit: quantiles of no values")
	}
	out := make([]float64, len(ps))
	// x[:lo] holds the lo smallest values, and every position selected so
	// far holds its order statistic.
	lo := 0
	stat := func(k int) float64 {
		if k >= lo {
			selectNth(x[lo:], k-lo)
			lo = k + 1
		}
		return x[k]
	}
	for q, p := range ps {
		if p < 0 || p > 1 || (q > 0 && p < ps[q-1]) {
			panic(fmt.Sprintf("fit: quantile levels %v not ascending in [0, 1]", ps))
		}
		h := float64(n-1) * p
		k := int(math.Floor(h))
		a := stat(k)
		if t := h - float64(k); t > 0 && k+1 < n {
			b := stat(k + 1)
			out[q] = a + t*(b-a)
		} else {
			out[q] = a
		}
	}
	return out
}

// selectNth reorders x so that x[k] is the value it would hold if x were
// sorted, with x[:k] ≤ x[k] ≤ x[k+1:]. It is Hoare's FIND (Hoare 1961,
// "Algorithm 65: Find", CACM 4(7)) with a median-of-three pivot; after
// 2·log2(n) partitioning rounds without finishing it sorts what is left, so
// the worst case stays O(n log n).
func selectNth(x []float64, k int) {
	lo, hi := 0, len(x)-1
	budget := 2 * bits.Len(uint(len(x)))
	for hi > lo {
		if budget == 0 {
			slices.Sort(x[lo : hi+1])
			return
		}
		budget--
		mid := lo + (hi-lo)/2
		if x[mid] < x[lo] {
			x[mid], x[lo] = x[lo], x[mid]
		}
		if x[hi] < x[lo] {
			x[hi], x[lo] = x[lo], x[hi]
		}
		if x[hi] < x[mid] {
			x[hi], x[mid] = x[mid], x[hi]
		}
		p := x[mid]
		i, j := lo, hi
		for i <= j {
			for x[i] < p {
				i++
			}
			for x[j] > p {
				j--
			}
			if i <= j {
				x[i], x[j] = x[j], x[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return
		}
	}
}
