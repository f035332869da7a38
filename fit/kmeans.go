package fit

import (
	"cmp"
	"context"
	"fmt"
	"math/rand/v2"
	"slices"
)

// KMeansConfig configures KMeans. The zero value of every field but K
// selects a default.
type KMeansConfig struct {
	// K is the number of clusters, at least 1 and at most the number of
	// distinct rows.
	K int
	// Seed seeds all randomness. Restart r draws from a PCG generator
	// (math/rand/v2) seeded with (Seed, r), so restarts are independent
	// and a fit is reproducible from Seed alone.
	Seed uint64
	// Restarts is the number of independent seedings, each followed by
	// Lloyd's iterations; the lowest inertia wins. 0 means 10.
	Restarts int
	// MaxIter caps Lloyd's iterations per restart. 0 means 300.
	MaxIter int
	// Tol is the relative centre-shift tolerance: a restart has converged
	// when Σ_k ‖c_k(new) − c_k(old)‖² ≤ Tol · Σ_j s_j², with s_j² the
	// population variance of feature j. 0 means 1e-4.
	Tol float64
	// Trials is the number of candidates greedy k-means++ draws per centre.
	// 0 means 2 + ⌊ln K⌋ (Arthur and Vassilvitskii 2007; common practice).
	Trials int
	// Workers is the number of goroutines; 0 means GOMAXPROCS. The result
	// does not depend on it.
	Workers int
}

// Defaults of KMeansConfig.
const (
	defaultRestarts = 10
	defaultMaxIter  = 300
	defaultTol      = 1e-4
)

// KMeansResult is a fitted k-means partition and how the fit went.
type KMeansResult struct {
	// K is the number of clusters and D the number of features.
	K, D int
	// Centers holds K centres of D features, row-major, in the units of the
	// input. Clusters are ordered by descending size, ties by the
	// lexicographic order of their centres.
	Centers []float64
	// Sizes is the number of rows assigned to each centre.
	Sizes []int64
	// Inertia is Σ_i ‖x_i − c_{l(i)}‖² over all rows for the final
	// assignment, every term summed as Σ_j (x_ij − c_j)² (never through
	// ‖x‖² − 2x·c + ‖c‖², which cancels badly far from the origin).
	Inertia float64
	// Iterations is the number of Lloyd iterations (assignment and
	// update) of the winning restart, counting a last one that found no
	// label to change.
	Iterations int
	// Converged is false only when the winning restart hit MaxIter.
	Converged bool
	// Stop says why the winning restart stopped: "assignments unchanged",
	// "centre shift below tolerance" or "iteration limit".
	Stop string
	// Restart is the 0-based index of the winning restart.
	Restart int
	// Reseeded counts the empty clusters re-seeded in the winning restart.
	Reseeded int
	// DistanceEvals counts the point–centre squared distances computed in
	// the winning restart: seeding (see seedGreedy), n·K per assignment
	// pass and n per empty-cluster search.
	DistanceEvals int64
}

// KMeans partitions the rows of src into cfg.K clusters minimising the
// inertia Σ_i ‖x_i − c_{l(i)}‖², the within-cluster sum of squared
// Euclidean distances. Each of cfg.Restarts restarts seeds centres by
// greedy k-means++ (seedGreedy) and refines them by Lloyd's iterations
// (lloyd); the restart with the lowest inertia wins (the lowest restart
// index on ties). Clusters are then ordered by descending size, ties by the
// lexicographic order of their centres.
//
// Work is spread over cfg.Workers goroutines in fixed chunks whose partial
// sums are added in chunk order, so the result is bit for bit the same for
// any cfg.Workers or GOMAXPROCS. Besides src, memory is O(n): one float64
// (seeding distances) and one int32 (labels) per row.
//
// Errors: K < 1, K above the number of rows, fewer distinct rows than K, a
// negative setting, a non-finite value, a source error, ctx's error.
func KMeans(ctx context.Context, src Source, cfg KMeansConfig) (*KMeansResult, error) {
	n, d := src.Len(), src.Dim()
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	if cfg.K > n {
		return nil, fmt.Errorf("k-means: K = %d exceeds the %d rows", cfg.K, n)
	}
	sum, err := summarize(ctx, src, cfg.Workers)
	if err != nil {
		return nil, fmt.Errorf("k-means: %w", err)
	}
	var tolAbs float64
	for _, v := range sum.variances() {
		tolAbs += v
	}
	tolAbs *= cfg.Tol

	closest := make([]float64, n)
	run := newLloydRun(src, cfg.K, cfg.Workers)
	var best *KMeansResult
	for r := range cfg.Restarts {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("k-means: restart %d: %w", r, err)
		}
		rng := rand.New(rand.NewPCG(cfg.Seed, uint64(r)))
		c, seedEvals, err := seedGreedy(ctx, src, &sum.chunkLayout, cfg.K, cfg.Trials, cfg.Workers, rng, closest)
		if err != nil {
			return nil, fmt.Errorf("k-means: restart %d: %w", r, err)
		}
		out, err := run.lloyd(ctx, c, cfg.MaxIter, tolAbs)
		if err != nil {
			return nil, fmt.Errorf("k-means: restart %d: %w", r, err)
		}
		if best == nil || out.inertia < best.Inertia {
			best = &KMeansResult{
				K: cfg.K, D: d,
				Centers:       out.centers,
				Sizes:         out.sizes,
				Inertia:       out.inertia,
				Iterations:    out.iterations,
				Converged:     out.converged,
				Stop:          out.stop,
				Restart:       r,
				Reseeded:      out.reseeded,
				DistanceEvals: seedEvals + out.evals,
			}
		}
	}
	best.order()
	return best, nil
}

// withDefaults checks cfg and fills in the defaults of its zero fields.
func (cfg KMeansConfig) withDefaults() (KMeansConfig, error) {
	switch {
	case cfg.K < 1:
		return cfg, fmt.Errorf("k-means: K = %d; want at least 1", cfg.K)
	case cfg.Restarts < 0, cfg.MaxIter < 0, cfg.Trials < 0, cfg.Tol < 0:
		return cfg, fmt.Errorf("k-means: negative setting (Restarts %d, MaxIter %d, Trials %d, Tol %g)", cfg.Restarts, cfg.MaxIter, cfg.Trials, cfg.Tol)
	}
	if cfg.Restarts == 0 {
		cfg.Restarts = defaultRestarts
	}
	if cfg.MaxIter == 0 {
		cfg.MaxIter = defaultMaxIter
	}
	if cfg.Tol == 0 {
		cfg.Tol = defaultTol
	}
	if cfg.Trials == 0 {
		cfg.Trials = defaultTrials(cfg.K)
	}
	return cfg, nil
}

// order sorts the clusters by descending size, ties by the lexicographic
// order of their centres (then by their previous index, for identical
// centres).
func (res *KMeansResult) order() {
	k, d := res.K, res.D
	idx := make([]int, k)
	for j := range idx {
		idx[j] = j
	}
	slices.SortStableFunc(idx, func(a, b int) int {
		if c := cmp.Compare(res.Sizes[b], res.Sizes[a]); c != 0 {
			return c
		}
		return slices.Compare(res.Centers[a*d:(a+1)*d], res.Centers[b*d:(b+1)*d])
	})
	centers := make([]float64, k*d)
	sizes := make([]int64, k)
	for to, from := range idx {
		copy(centers[to*d:(to+1)*d], res.Centers[from*d:(from+1)*d])
		sizes[to] = res.Sizes[from]
	}
	res.Centers, res.Sizes = centers, sizes
}
