package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
)

// Covariance names the structure of the component covariance matrices of a
// Gaussian mixture (Celeux & Govaert 1995, Pattern Recognition 28(5),
// 781–793; Banfield & Raftery 1993).
type Covariance string

const (
	// CovFull gives every component its own unrestricted matrix Σ_k.
	CovFull Covariance = "full"
	// CovDiag gives every component its own diagonal matrix: features are
	// independent within a component.
	CovDiag Covariance = "diag"
	// CovSpherical gives every component its own multiple of the
	// identity, σ_k² I.
	CovSpherical Covariance = "spherical"
	// CovPooled shares one unrestricted matrix Σ among all components
	// (also called "tied"); the boundaries between components are then
	// linear, as in linear discriminant analysis.
	CovPooled Covariance = "pooled"
)

// Starting kinds of an EM restart, for MixtureConfig.Init.
const (
	InitKMeans   = "kmeans"   // the best k-means partition (KMeans with its default restarts)
	InitKMeansPP = "kmeans++" // greedy k-means++ seeds, one hard assignment
	InitRandom   = "random"   // K distinct random rows, the data's covariance
)

// MixtureConfig configures Mixture. Every field but K has a usable zero
// value.
type MixtureConfig struct {
	// K is the number of components, at least 1.
	K int
	// Covariance is the structure of the covariance matrices; "" means
	// CovFull.
	Covariance Covariance
	// Reg sets the covariance floor λ = Reg · v̄, where v̄ is the mean of
	// the features' population variances, added to the diagonal of every
	// covariance matrix after each maximisation step so that all of them
	// stay positive definite. 0 means 1e-6; negative is an error.
	Reg float64
	// Seed seeds all randomness; restart r draws from a PCG generator
	// (math/rand/v2) seeded with (Seed, r), so a fit is reproducible from
	// Seed alone.
	Seed uint64
	// Restarts is the number of EM runs from different starts; the
	// highest log-likelihood among the runs that are not set aside as
	// spurious wins. 0 means 4. Restart 0 starts as Init says; after it,
	// odd restarts start from greedy k-means++ seeds and even ones from
	// random rows, so the default runs are: Init, k-means++, random,
	// k-means++. Each restart r uses its own random stream (Seed, r).
	Restarts int
	// Init is the starting kind of restart 0: InitKMeans (the default for
	// ""), InitKMeansPP or InitRandom. InitKMeans and InitKMeansPP take
	// weights, means and covariances from the partition of the rows by
	// their nearest centre (k-means centres, or greedy k-means++ seeds
	// without Lloyd's iterations); InitRandom takes K distinct random rows
	// as means with equal weights and the data's covariance.
	Init string
	// MaxIter caps the EM iterations per restart. 0 means 200.
	MaxIter int
	// Tol stops a restart when the mean log-likelihood per row changes by
	// less than Tol between iterations. 0 means 1e-6.
	Tol float64
	// Workers is the number of goroutines; 0 means GOMAXPROCS. The result
	// is bit for bit the same for any value.
	Workers int
	// Progress, when set, is called after every E-step of every restart
	// with the total log-likelihood (see Progress).
	Progress Progress
}

// Defaults of MixtureConfig.
const (
	defaultMixReg      = 1e-6
	defaultMixRestarts = 4
	defaultMixMaxIter  = 200
	defaultMixTol      = 1e-6
)

// MixtureResult is a fitted Gaussian mixture and how the fit went.
// Components are ordered by descending weight, ties by the lexicographic
// order of their means.
type MixtureResult struct {
	// K is the number of components, D the number of features and N the
	// number of rows fitted.
	K, D, N int
	// Covariance is the structure fitted.
	Covariance Covariance
	// Weights holds the K mixing proportions π_k (they sum to 1).
	Weights []float64
	// Means holds K means of D features, row-major.
	Means []float64
	// Covs holds K blocks of D×D covariance matrices Σ_k, row-major,
	// always as full matrices whatever the structure (diag and spherical
	// with zero off-diagonals; pooled repeats the shared matrix). They
	// include the floor λ on the diagonal.
	Covs []float64
	// LogLikelihood is ln L = Σ_i ln p(x_i) under the reported parameters,
	// natural log, summed over rows.
	LogLikelihood float64
	// ClassEntropy is E = −Σ_i Σ_k τ_ik ln τ_ik for the memberships τ_ik
	// under the reported parameters (for ICL).
	ClassEntropy float64
	// Params is the number of free parameters p (see paramCount).
	Params int
	// BIC = −2 ln L + p ln n (Schwarz 1978) and AIC = −2 ln L + 2p
	// (Akaike 1974); lower is better.
	BIC, AIC float64
	// Floor is the covariance floor λ = Reg · v̄ that was added to the
	// diagonals.
	Floor float64
	// Iterations is the number of EM iterations (maximisation steps) of
	// the winning restart.
	Iterations int
	// Converged is false only when the winning restart hit MaxIter.
	Converged bool
	// Stop says why the winning restart stopped: "log-likelihood change
	// below tolerance" or "iteration limit".
	Stop string
	// Restart is the 0-based index of the winning restart.
	Restart int
	// Spurious counts restarts set aside: their solution was degenerate
	// (a component holding less than d+1 rows' worth of membership for
	// full matrices, 2 for diag and spherical, 1 for pooled; or a
	// component whose variance in some direction is below 1e-4 times the
	// data's variance in that direction, floor included), or they could
	// not go on (components that kept losing their weight, a matrix that
	// was not positive definite).
	Spurious int
	// Events says what happened during the fit, one line per event, each
	// naming its restart: components re-seeded, restarts set aside and
	// why. Rows are named by their 0-based position in the source.
	Events []string

	model *mixModel // parameters in the form Posterior uses, in output order
	// trace holds the mean log-likelihood per row of every pass of the
	// winning restart, and reseeded the passes after which a component was
	// re-seeded (where the log-likelihood may drop).
	trace    []float64
	reseeded []int
}

// maxMixEvents caps MixtureResult.Events.
const maxMixEvents = 200

// mixSettings is a MixtureConfig with defaults filled in and checked.
type mixSettings struct {
	MixtureConfig
}

func (cfg MixtureConfig) settings() (mixSettings, error) {
	if cfg.K < 1 {
		return mixSettings{}, fmt.Errorf("mixture: K = %d, need at least 1", cfg.K)
	}
	switch cfg.Covariance {
	case "":
		cfg.Covariance = CovFull
	case CovFull, CovDiag, CovSpherical, CovPooled:
	default:
		return mixSettings{}, fmt.Errorf("mixture: unknown covariance structure %q (want full, diag, spherical or pooled)", string(cfg.Covariance))
	}
	switch {
	case cfg.Reg < 0 || math.IsNaN(cfg.Reg) || math.IsInf(cfg.Reg, 0):
		return mixSettings{}, fmt.Errorf("mixture: Reg = %v, need a finite value ≥ 0", cfg.Reg)
	case cfg.Reg == 0:
		cfg.Reg = defaultMixReg
	}
	switch cfg.Init {
	case "":
		cfg.Init = InitKMeans
	case InitKMeans, InitKMeansPP, InitRandom:
	default:
		return mixSettings{}, fmt.Errorf("mixture: unknown start %q (want kmeans, kmeans++ or random)", cfg.Init)
	}
	if cfg.Restarts < 0 || cfg.MaxIter < 0 || cfg.Tol < 0 || math.IsNaN(cfg.Tol) {
		return mixSettings{}, fmt.Errorf("mixture: negative setting (Restarts %d, MaxIter %d, Tol %v)", cfg.Restarts, cfg.MaxIter, cfg.Tol)
	}
	if cfg.Restarts == 0 {
		cfg.Restarts = defaultMixRestarts
	}
	if cfg.MaxIter == 0 {
		cfg.MaxIter = defaultMixMaxIter
	}
	if cfg.Tol == 0 {
		cfg.Tol = defaultMixTol
	}
	cfg.Workers = workerCount(cfg.Workers)
	return mixSettings{cfg}, nil
}

// restartKind is the starting kind of restart r: Init for r = 0, then
// k-means++ for odd r and random for even r.
func (s mixSettings) restartKind(r int) string {
	switch {
	case r == 0:
		return s.Init
	case r%2 == 1:
		return InitKMeansPP
	default:
		return InitRandom
	}
}

// Mixture fits a mixture of cfg.K Gaussian components with the covariance
// structure cfg.Covariance to the rows of src by maximum likelihood, using
// the EM algorithm (Dempster, Laird & Rubin 1977, JRSS B 39, 1–38), from
// cfg.Restarts starts of mixed kinds (see MixtureConfig.Restarts). The
// density of a row x is
//
//	p(x) = Σ_k π_k φ(x; μ_k, Σ_k),
//	φ(x; μ, Σ) = (2π)^(−d/2) |Σ|^(−1/2) exp(−½ (x − μ)ᵀ Σ⁻¹ (x − μ)).
//
// Each EM iteration is one pass over the rows (eChunk: responsibilities in
// the log domain and the sums of the maximisation step together) followed
// by the maximisation step (mStep) with the covariance floor λ added to
// the diagonals. A restart stops when the mean log-likelihood per row
// changes by less than cfg.Tol, or after cfg.MaxIter iterations; its
// parameters are reported together with the log-likelihood, memberships
// and class entropy of one more pass under exactly those parameters.
//
// The likelihood is unbounded (a component can shrink onto a few rows), so
// restarts whose solution is degenerate (see MixtureResult.Spurious) are
// set aside, and a component that holds less than one row's worth of
// membership during EM is re-seeded at the row of lowest density with
// weight 1/K and the data's covariance (at most K re-seeds per restart);
// both are recorded in Events. The best remaining restart wins (highest
// log-likelihood, lowest restart index on ties).
//
// Work is spread over cfg.Workers goroutines in the fixed chunks of src
// with partial sums added in chunk order, so the result is bit for bit the
// same for any cfg.Workers or GOMAXPROCS.
//
// Errors: a bad setting; no rows; K above the number of rows, or above the
// number of distinct rows; fewer rows than K components of this structure
// need (mixMinRows each); all rows identical; a non-finite value; every
// restart set aside; a source error; ctx's error.
func Mixture(ctx context.Context, src Source, cfg MixtureConfig) (*MixtureResult, error) {
	s, err := cfg.settings()
	if err != nil {
		return nil, err
	}
	n, d := src.Len(), src.Dim()
	if d <= 0 {
		panic(fmt.Sprintf("fit: source has %d features", d))
	}
	switch need := s.K * mixMinRows(s.Covariance, d); {
	case n == 0:
		return nil, errors.New("mixture: no rows")
	case s.K > n:
		return nil, fmt.Errorf("mixture: K = %d exceeds the %d rows", s.K, n)
	case need > n:
		return nil, fmt.Errorf("mixture: %d %s components in %d features need at least %d rows (%d each), have %d",
			s.K, s.Covariance, d, need, mixMinRows(s.Covariance, d), n)
	}
	data, err := scanMixData(ctx, src, s.Workers, s.Reg)
	if err != nil {
		return nil, fmt.Errorf("mixture: %w", err)
	}
	if data.meanVar == 0 {
		return nil, fmt.Errorf("mixture: all %d rows are identical", n)
	}
	if s.K > 1 {
		distinct, err := countDistinctRows(ctx, src, s.K)
		if err != nil {
			return nil, fmt.Errorf("mixture: %w", err)
		}
		if distinct < s.K {
			return nil, fmt.Errorf("mixture: only %d distinct rows for K = %d", distinct, s.K)
		}
	}
	f := newMixFitter(src, s, data)
	var (
		best     *mixRun
		spurious int
		events   []string
		lastWhy  string
	)
	note := func(r int, kind, msg string) {
		if len(events) < maxMixEvents {
			events = append(events, fmt.Sprintf("restart %d (%s): %s", r, kind, msg))
		}
	}
	for r := range s.Restarts {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("mixture: restart %d: %w", r, err)
		}
		kind := s.restartKind(r)
		run, err := f.restart(ctx, r, kind)
		if run != nil {
			for _, e := range run.events {
				note(r, kind, e)
			}
		}
		if err != nil {
			if ctx.Err() != nil {
				return nil, fmt.Errorf("mixture: restart %d: %w", r, err)
			}
			var fatal *mixFatal
			if errors.As(err, &fatal) {
				return nil, fmt.Errorf("mixture: restart %d: %w", r, fatal.err)
			}
			spurious++
			lastWhy = err.Error()
			note(r, kind, "set aside: "+lastWhy)
			continue
		}
		if why := f.spurious(run); why != "" {
			spurious++
			lastWhy = why
			note(r, kind, fmt.Sprintf("set aside as spurious (log-likelihood %.6g): %s", run.ll, why))
			continue
		}
		if best == nil || run.ll > best.ll {
			best = run
		}
	}
	if best == nil {
		hint := ""
		if strings.Contains(lastWhy, "variance in some direction") {
			hint = " (rows sharing values; a Reg of 1e-4 or more accepts components held up by the covariance floor)"
		}
		return nil, fmt.Errorf("mixture: all %d restarts were set aside; last: %s%s", s.Restarts, lastWhy, hint)
	}
	if len(events) == maxMixEvents {
		events = append(events, "further events not recorded")
	}
	return f.result(best, spurious, events), nil
}

// mixFatal marks an error inside a restart that no other restart can
// avoid (a source error, a non-finite value), as opposed to a restart that
// is merely set aside.
type mixFatal struct{ err error }

func (e *mixFatal) Error() string { return e.err.Error() }
func (e *mixFatal) Unwrap() error { return e.err }

// permuted returns a copy of m with its components in the given order:
// component to of the copy is component order[to] of m, every parameter
// and factor copied bit for bit.
func (m *mixModel) permuted(order []int) *mixModel {
	k, d, q := m.k, m.d, triLen(m.d)
	if len(order) != k {
		panic(fmt.Sprintf("fit: reorder %d components by %d indexes", k, len(order)))
	}
	out := newMixModel(k, d, m.cov)
	for to, from := range order {
		out.w[to] = m.w[from]
		copy(out.mean[to*d:(to+1)*d], m.mean[from*d:(from+1)*d])
		copy(out.sigma[to*d*d:(to+1)*d*d], m.sigma[from*d*d:(from+1)*d*d])
		copy(out.chol[to*q:(to+1)*q], m.chol[from*q:(from+1)*q])
		copy(out.lsc[to*q:(to+1)*q], m.lsc[from*q:(from+1)*q])
		copy(out.invDiag[to*d:(to+1)*d], m.invDiag[from*d:(from+1)*d])
		out.logDet[to] = m.logDet[from]
		out.logNorm[to] = m.logNorm[from]
	}
	return out
}

// Reordered returns a copy of m whose component to is m's component
// order[to] (order is a permutation of 0 … K−1): Weights, Means, Covs and
// the factors Posterior uses are moved bit for bit, so Posterior gives the
// same memberships, permuted, and the same label on every row except where
// two components tie exactly, which it breaks by the new order. The fit's
// diagnostics are copied as they are. It panics unless order is a
// permutation of 0 … K−1.
func (m *MixtureResult) Reordered(order []int) *MixtureResult {
	seen := make([]bool, m.K)
	for _, j := range order {
		if j < 0 || j >= m.K || seen[j] {
			panic(fmt.Sprintf("fit: %v is not a permutation of %d components", order, m.K))
		}
		seen[j] = true
	}
	out := *m
	out.model = m.model.permuted(order)
	out.Weights = slices.Clone(out.model.w)
	out.Means = slices.Clone(out.model.mean)
	out.Covs = slices.Clone(out.model.sigma)
	return &out
}

// result assembles the output of the winning run: components ordered by
// descending weight, ties by the lexicographic order of their means.
func (f *mixFitter) result(run *mixRun, spurious int, events []string) *MixtureResult {
	m := run.model
	k, d := m.k, m.d
	out := m.permuted(clusterOrder(m.w, m.mean, d))
	n := float64(f.data.n)
	p := paramCount(m.cov, k, d)
	return &MixtureResult{
		K: k, D: d, N: f.data.n,
		Covariance:    m.cov,
		Weights:       slices.Clone(out.w),
		Means:         slices.Clone(out.mean),
		Covs:          slices.Clone(out.sigma),
		LogLikelihood: run.ll,
		ClassEntropy:  run.ent,
		Params:        p,
		BIC:           -2*run.ll + float64(p)*math.Log(n),
		AIC:           -2*run.ll + 2*float64(p),
		Floor:         f.data.floor,
		Iterations:    run.iters,
		Converged:     run.converged,
		Stop:          run.stop,
		Restart:       run.restart,
		Spurious:      spurious,
		Events:        events,
		model:         out,
		trace:         run.trace,
		reseeded:      run.reseeded,
	}
}
