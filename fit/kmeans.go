package fit

import (
	"context"
	"fmt"
	"math/rand/v2"
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
	// the iterations of Algorithm; the lowest inertia wins. 0 means 10.
	Restarts int
	// MaxIter caps the iterations per restart: Lloyd's iterations (0
	// means 300) or, for AlgorithmMiniBatch, batches (0 means
	// min(100·⌈n/BatchRows⌉, 10 000): a hundred passes' worth of rows for
	// small tables, at most 10⁴ batches for large ones).
	MaxIter int
	// Tol is the relative centre-shift tolerance: a restart has converged
	// when Σ_k ‖c_k(new) − c_k(old)‖² ≤ Tol · Σ_j s_j², with s_j² the
	// population variance of feature j. For AlgorithmMiniBatch the shift
	// is taken over a window of 10 batches (see miniBatch). 0 means 1e-4.
	Tol float64
	// Trials is the number of candidates greedy k-means++ draws per centre.
	// 0 means 2 + ⌊ln K⌋ (Arthur and Vassilvitskii 2007; common practice).
	Trials int
	// Workers is the number of goroutines; 0 means GOMAXPROCS. The result
	// does not depend on it.
	Workers int
	// Algorithm chooses the iterations: AlgorithmLloyd ("lloyd", plain
	// Lloyd), AlgorithmHamerly ("hamerly": Hamerly 2010, exact: the same
	// assignments, centres, stop and inertia as plain Lloyd bit for bit,
	// from fewer distance computations, for 16 more bytes per row) or
	// AlgorithmMiniBatch ("minibatch": Sculley 2010, approximate, from
	// random batches of rows, for very large tables). "" means
	// AlgorithmHamerly when K·d > hamerlyMinWork, else AlgorithmLloyd:
	// Hamerly's saving is in distances, and where the AVX2 kernel makes
	// distances cheap and K·d is small (K = 8, d = 8) plain Lloyd takes
	// less time for the same result (BenchmarkLloydIteration,
	// BenchmarkHamerlyIteration).
	Algorithm string
	// Progress, when set, is called after every iteration of every
	// restart (see Progress); the objective is the inertia of the
	// assignment just made, or NaN where Hamerly's bounds skipped rows and
	// the exact sum is not known until the end.
	Progress Progress
	// Seeding chooses the starts: SeedingGreedy ("kmeans++": greedy
	// k-means++, about 2K passes over the data) or SeedingScalable
	// ("kmeans||": Bahmani et al. 2012, oversampling factor ℓ = 2K over 5
	// rounds, then weighted greedy k-means++ on the candidates; 6 passes
	// for any K, but more distance computations). "" means SeedingGreedy
	// for sources of fewer than ScalableSeedingRows (10⁶) rows and
	// SeedingScalable from there up.
	Seeding string
	// BatchRows is the number of rows per batch of AlgorithmMiniBatch; 0
	// means 1024. Other algorithms ignore it.
	BatchRows int
}

// Values of KMeansConfig.Algorithm and KMeansConfig.Seeding.
const (
	AlgorithmLloyd     = "lloyd"
	AlgorithmHamerly   = "hamerly"
	AlgorithmMiniBatch = "minibatch"
	SeedingGreedy      = "kmeans++"
	SeedingScalable    = "kmeans||"
)

// ScalableSeedingRows is the number of rows from which an empty
// KMeansConfig.Seeding means SeedingScalable. Below it a table is small
// enough to be held in memory, where greedy k-means++'s 2K passes cost
// nothing but its (fewer) distances; from there up a source is likely read
// from a file or a table, where each pass k-means|| saves is a read.
const ScalableSeedingRows = 1_000_000

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
	// label to change; for AlgorithmMiniBatch, the number of batches.
	Iterations int
	// Converged is false only when the winning restart hit MaxIter.
	Converged bool
	// Stop says why the winning restart stopped: "assignments unchanged",
	// "centre shift below tolerance" or "iteration limit".
	Stop string
	// Restart is the 0-based index of the winning restart.
	Restart int
	// Reseeded counts the empty clusters re-seeded in the winning restart
	// (always 0 for AlgorithmMiniBatch, which does not re-seed).
	Reseeded int
	// DistanceEvals counts the squared distances computed in the winning
	// restart: seeding (see seedGreedy and seedScalable), then for
	// AlgorithmLloyd n·K per assignment pass and n per empty-cluster
	// search; for AlgorithmHamerly the point–centre distances its bounds
	// did not spare, n per empty-cluster search, n for the final inertia
	// and per pass K(K−1)/2 centre–centre distances and up to K centre
	// shifts; for
	// AlgorithmMiniBatch BatchRows·K per batch and n·K for the final pass.
	DistanceEvals int64
	// Algorithm says what ran, as "<algorithm>, <seeding> seeding", e.g.
	// "hamerly, kmeans++ seeding".
	Algorithm string
}

// KMeans partitions the rows of src into cfg.K clusters minimising the
// inertia Σ_i ‖x_i − c_{l(i)}‖², the within-cluster sum of squared
// Euclidean distances. Each of cfg.Restarts restarts seeds centres by
// greedy k-means++ (seedGreedy) or k-means|| (seedScalable) and refines
// them by Lloyd's iterations, plain (lloyd) or accelerated (hamerlyPass),
// or by mini-batch k-means (miniBatch); the restart with the lowest
// inertia wins (the lowest restart index on ties). Clusters are then
// ordered by descending size, ties by the lexicographic order of their
// centres.
//
// Work is spread over cfg.Workers goroutines in fixed chunks whose partial
// sums are added in chunk order, so the result is bit for bit the same for
// any cfg.Workers or GOMAXPROCS. Besides src, memory is O(n): one float64
// (seeding distances) and one int32 (labels) per row, and for
// AlgorithmHamerly two more float64 (its bounds), 28 bytes per row in all.
//
// Errors: K < 1, K above the number of rows, fewer distinct rows than K, a
// negative setting, an unknown algorithm or seeding, a non-finite value, a
// source error, ctx's error.
func KMeans(ctx context.Context, src Source, cfg KMeansConfig) (*KMeansResult, error) {
	n, d := src.Len(), src.Dim()
	cfg, err := cfg.withDefaults(n, src.Dim())
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
	if cfg.Algorithm == AlgorithmHamerly {
		run.ham = newHamerlyState(n, cfg.K, d)
	}
	var best *KMeansResult
	for r := range cfg.Restarts {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("k-means: restart %d: %w", r, err)
		}
		rng := rand.New(rand.NewPCG(cfg.Seed, uint64(r)))
		var c []float64
		var seedEvals int64
		if cfg.Seeding == SeedingScalable {
			// run.labels is free until the iterations start.
			c, seedEvals, err = seedScalable(ctx, src, &sum.chunkLayout, cfg.K, cfg.Trials, cfg.Workers, rng, closest, run.labels)
		} else {
			c, seedEvals, err = seedGreedy(ctx, src, &sum.chunkLayout, cfg.K, cfg.Trials, cfg.Workers, rng, closest)
		}
		if err != nil {
			return nil, fmt.Errorf("k-means: restart %d: %w", r, err)
		}
		run.progress = nil
		if cfg.Progress != nil {
			restart := r
			run.progress = func(it int, obj float64) { cfg.Progress(restart, it, obj) }
		}
		var out *lloydOutcome
		if cfg.Algorithm == AlgorithmMiniBatch {
			out, err = run.miniBatch(ctx, &sum.chunkLayout, c, cfg.BatchRows, cfg.MaxIter, tolAbs, rng)
		} else {
			out, err = run.lloyd(ctx, c, cfg.MaxIter, tolAbs)
		}
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
				Algorithm:     cfg.Algorithm + ", " + cfg.Seeding + " seeding",
			}
		}
	}
	best.order()
	return best, nil
}

// withDefaults checks cfg and fills in the defaults of its zero fields for
// a source of n rows.
// hamerlyMinWork is the K·d at or below which the default algorithm is
// plain Lloyd: measured on these machines, Hamerly's bound bookkeeping
// costs more than the distances it saves at K = 8, d = 8, and less at
// K = 32, d = 8.
const hamerlyMinWork = 64

func (cfg KMeansConfig) withDefaults(n, d int) (KMeansConfig, error) {
	switch {
	case cfg.K < 1:
		return cfg, fmt.Errorf("k-means: K = %d; want at least 1", cfg.K)
	case cfg.Restarts < 0, cfg.MaxIter < 0, cfg.Trials < 0, cfg.Tol < 0, cfg.BatchRows < 0:
		return cfg, fmt.Errorf("k-means: negative setting (Restarts %d, MaxIter %d, Trials %d, Tol %g, BatchRows %d)", cfg.Restarts, cfg.MaxIter, cfg.Trials, cfg.Tol, cfg.BatchRows)
	}
	switch cfg.Algorithm {
	case "":
		cfg.Algorithm = AlgorithmHamerly
		if cfg.K*d <= hamerlyMinWork {
			cfg.Algorithm = AlgorithmLloyd
		}
	case AlgorithmLloyd, AlgorithmHamerly, AlgorithmMiniBatch:
	default:
		return cfg, fmt.Errorf("k-means: unknown algorithm %q (want %q, %q or %q)", cfg.Algorithm, AlgorithmLloyd, AlgorithmHamerly, AlgorithmMiniBatch)
	}
	switch cfg.Seeding {
	case "":
		cfg.Seeding = SeedingGreedy
		if n >= ScalableSeedingRows {
			cfg.Seeding = SeedingScalable
		}
	case SeedingGreedy, SeedingScalable:
	default:
		return cfg, fmt.Errorf("k-means: unknown seeding %q (want %q or %q)", cfg.Seeding, SeedingGreedy, SeedingScalable)
	}
	if cfg.Restarts == 0 {
		cfg.Restarts = defaultRestarts
	}
	if cfg.BatchRows == 0 {
		cfg.BatchRows = defaultBatchRows
	}
	if cfg.MaxIter == 0 {
		cfg.MaxIter = defaultMaxIter
		if cfg.Algorithm == AlgorithmMiniBatch {
			cfg.MaxIter = defaultMiniBatches(n, cfg.BatchRows)
		}
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
	idx := clusterOrder(res.Sizes, res.Centers, d)
	centers := make([]float64, k*d)
	sizes := make([]int64, k)
	for to, from := range idx {
		copy(centers[to*d:(to+1)*d], res.Centers[from*d:(from+1)*d])
		sizes[to] = res.Sizes[from]
	}
	res.Centers, res.Sizes = centers, sizes
}
