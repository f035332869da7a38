package fit

import (
	"context"
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
)

// mixData is what a mixture fit needs to know about the data as a whole.
type mixData struct {
	n, d int
	mean []float64 // d
	cov  []float64 // d×d maximum-likelihood covariance (divided by n)
	// meanVar is v̄ = tr(cov)/d, the mean of the features' population
	// variances, and floor the covariance floor λ = Reg · v̄.
	meanVar, floor float64
	// refChol is the packed Cholesky factor of cov + λI, the yardstick of
	// the spurious rule.
	refChol []float64
	lay     chunkLayout
}

// mixMoments is one chunk's count, mean and scatter sum Σ (x − x̄)(x − x̄)ᵀ.
type mixMoments struct {
	n       int
	mean, m []float64
}

// scanMixData reads src once and returns its mean, its maximum-likelihood
// covariance, the covariance floor λ = reg · tr(cov)/d and the chunk
// layout. Every value is checked to be finite. Within a chunk the mean is
// found first and the scatter summed around it (weightedScatter); chunks
// are merged in chunk order by the pairwise update of Chan, Golub &
// LeVeque (1983, Amer. Statist. 37, 242–247), in matrix form:
//
//	n = n_a + n_b,  δ = x̄_b − x̄_a,  x̄ = x̄_a + δ n_b/n,
//	M = M_a + M_b + δ δᵀ n_a n_b / n,
//
// so that the result is the same for any number of workers and no
// cancellation of the kind Σ x xᵀ − n x̄ x̄ᵀ occurs.
func scanMixData(ctx context.Context, src Source, workers int, reg float64) (*mixData, error) {
	d, nc := src.Dim(), src.Chunks()
	t := &mixData{
		d:    d,
		mean: make([]float64, d),
		cov:  make([]float64, d*d),
		lay:  chunkLayout{first: make([]int, nc), rows: make([]int, nc)},
	}
	red := newOrderedReduce(
		func() *mixMoments { return &mixMoments{mean: make([]float64, d), m: make([]float64, d*d)} },
		func(p *mixMoments) {
			if p.n == 0 {
				return
			}
			na, nb := float64(t.n), float64(p.n)
			n := na + nb
			for a := range d {
				da := p.mean[a] - t.mean[a]
				for b := range d {
					t.cov[a*d+b] += p.m[a*d+b] + da*(p.mean[b]-t.mean[b])*(na*nb/n)
				}
			}
			for a := range d {
				t.mean[a] += (p.mean[a] - t.mean[a]) * (nb / n)
			}
			t.n += p.n
		})
	err := eachChunk(ctx, src, workers, func(_, c int, rows []float64, first int) error {
		if len(rows)%d != 0 {
			return fmt.Errorf("chunk %d: %d values do not make rows of %d features", c, len(rows), d)
		}
		for i, v := range rows {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("chunk %d: row %d, feature %d: value %v is not finite", c, first+i/d, i%d, v)
			}
		}
		t.lay.first[c], t.lay.rows[c] = first, len(rows)/d
		p := red.part()
		p.n = len(rows) / d
		w := weightedScatter(p.mean, p.m, rows, d, nil)
		for i := range p.m {
			p.m[i] *= w
		}
		red.done(c, p)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("scan rows: %w", err)
	}
	if t.n != src.Len() {
		return nil, fmt.Errorf("scan rows: chunks hold %d rows, source says %d", t.n, src.Len())
	}
	var tr float64
	for a := range d {
		for b := range d {
			t.cov[a*d+b] /= float64(t.n)
		}
		tr += t.cov[a*d+a]
	}
	if math.IsInf(tr, 0) || math.IsNaN(tr) {
		return nil, fmt.Errorf("scan rows: values too large to square")
	}
	t.meanVar = tr / float64(d)
	t.floor = reg * t.meanVar
	ref := make([]float64, d*d)
	copy(ref, t.cov)
	for a := range d {
		ref[a*d+a] += t.floor
	}
	t.refChol = make([]float64, triLen(d))
	if t.meanVar > 0 && !cholPacked(t.refChol, ref, d) {
		return nil, fmt.Errorf("scan rows: the data's covariance plus the floor %g is not positive definite", t.floor)
	}
	return t, nil
}

// countDistinctRows reads src in chunk order until it has seen limit
// distinct rows (comparing values bit for bit, with −0 taken as +0) and
// returns how many it found, at most limit. Usually the first chunk
// suffices; it reads every row only when the data hold fewer than limit
// distinct rows.
func countDistinctRows(ctx context.Context, src Source, limit int) (int, error) {
	d := src.Dim()
	seen := make(map[string]struct{}, limit)
	key := make([]byte, 0, 8*d)
	var buf []float64
	for c := range src.Chunks() {
		if err := ctx.Err(); err != nil {
			return 0, fmt.Errorf("count distinct rows: %w", err)
		}
		rows, _, err := src.Chunk(c, buf)
		if err != nil {
			return 0, fmt.Errorf("count distinct rows: chunk %d: %w", c, err)
		}
		if cap(rows) > cap(buf) {
			buf = rows[:0]
		}
		for i := 0; i+d <= len(rows); i += d {
			key = key[:0]
			for _, v := range rows[i : i+d] {
				key = binary.LittleEndian.AppendUint64(key, math.Float64bits(v+0))
			}
			seen[string(key)] = struct{}{}
			if len(seen) >= limit {
				return limit, nil
			}
		}
	}
	return len(seen), nil
}

// start builds the starting parameters of a restart (mixture starts as in
// McLachlan & Peel 2000, Finite Mixture Models, §2.12):
//
//   - InitKMeans: the centres of KMeans (its default restarts, seeded with
//     Seed), then one hard assignment of every row to its nearest centre
//     and a maximisation step on that partition (fromCentres).
//   - InitKMeansPP: greedy k-means++ seeds (Arthur & Vassilvitskii 2007)
//     drawn from rng without Lloyd's iterations, then the same hard
//     assignment and maximisation step, so means, weights and covariances
//     come from the data around each seed.
//   - InitRandom: K rows of distinct values drawn uniformly from rng as
//     means, equal weights, and the data's covariance plus the floor (in
//     the fitted structure) for every component.
func (f *mixFitter) start(ctx context.Context, run *mixRun, kind string, rng *rand.Rand) (*mixModel, error) {
	k, d := f.s.K, f.data.d
	switch kind {
	case InitKMeans:
		km, err := KMeans(ctx, f.src, KMeansConfig{K: k, Seed: f.s.Seed, Workers: f.s.Workers})
		if err != nil {
			return nil, err
		}
		return f.fromCentres(ctx, run, km.Centers)
	case InitKMeansPP:
		c, err := seedCenters(ctx, f.src, k, 0, f.s.Workers, rng)
		if err != nil {
			return nil, err
		}
		return f.fromCentres(ctx, run, c)
	case InitRandom:
		means, err := f.randomRows(ctx, rng)
		if err != nil {
			return nil, err
		}
		m := newMixModel(k, d, f.s.Covariance)
		copy(m.mean, means)
		for j := range k {
			m.w[j] = 1 / float64(k)
			copy(m.sigma[j*d*d:(j+1)*d*d], f.structured)
		}
		return m, m.factor()
	}
	panic(fmt.Sprintf("fit: unknown mixture start %q", kind))
}

// fromCentres assigns every row to its nearest centre (Nearest: squared
// Euclidean distance, lowest index on ties) and sets the parameters by one
// maximisation step on that hard partition (responsibilities 0 or 1,
// sums taken around the centres). A cell holding no row is re-seeded at
// the row farthest from its centre (mixFitter.reseed).
func (f *mixFitter) fromCentres(ctx context.Context, run *mixRun, centres []float64) (*mixModel, error) {
	k, d := f.s.K, f.data.d
	m := newMixModel(k, d, f.s.Covariance)
	diag := m.diagonal()
	sl := m.sumLen()
	st, err := f.pass.each(ctx, func(st *mixStats, _ int, rows []float64, first int) {
		for i := 0; i+d <= len(rows); i += d {
			x := rows[i : i+d : i+d]
			j, dist := Nearest(centres, d, x)
			c := centres[j*d : (j+1)*d : (j+1)*d]
			sz := st.sz[j*d : (j+1)*d : (j+1)*d]
			szz := st.szz[j*sl : (j+1)*sl : (j+1)*sl]
			st.nk[j]++
			off := 0
			for a, v := range x {
				za := v - c[a]
				sz[a] += za
				if diag {
					szz[a] += za * za
					continue
				}
				for b := 0; b <= a; b++ {
					szz[off+b] += za * (x[b] - c[b])
				}
				off += a + 1
			}
			st.offerWorst(-dist, first+i/d, x)
		}
	})
	if err != nil {
		return nil, &mixFatal{fmt.Errorf("assign rows to starting centres: %w", err)}
	}
	copy(m.sigma, f.structured) // for cells without rows, until re-seeded
	f.empty = m.mStep(st, centres, f.data.floor, f.empty)
	if len(f.empty) > 0 {
		if err := f.reseed(run, m, st, f.empty, 0); err != nil {
			return nil, err
		}
	}
	return m, m.factor()
}

// randomRows draws K rows of pairwise distinct values uniformly at random
// (redrawing a row equal to one already drawn) and returns them as K×d
// values.
func (f *mixFitter) randomRows(ctx context.Context, rng *rand.Rand) ([]float64, error) {
	k, d, n := f.s.K, f.data.d, f.data.n
	out := make([]float64, 0, k*d)
	var buf []float64
	for tries := 0; len(out) < k*d; tries++ {
		if tries == 100*k {
			return nil, fmt.Errorf("no %d rows of distinct values in %d random draws", k, tries)
		}
		i := rng.IntN(n)
		c := f.data.lay.chunkOf(i)
		rows, first, err := f.src.Chunk(c, buf)
		if err != nil {
			return nil, &mixFatal{fmt.Errorf("chunk %d: %w", c, err)}
		}
		if cap(rows) > cap(buf) {
			buf = rows[:0]
		}
		x := rows[(i-first)*d : (i-first+1)*d]
		dup := false
		for p := 0; p < len(out) && !dup; p += d {
			dup = equalRows(out[p:p+d], x)
		}
		if !dup {
			out = append(out, x...)
		}
		if err := ctx.Err(); err != nil {
			return nil, err
		}
	}
	return out, nil
}

func equalRows(a, b []float64) bool {
	for i, v := range a {
		if v != b[i] {
			return false
		}
	}
	return true
}
