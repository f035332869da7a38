package fit

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// mixFitter holds what the restarts of one Mixture call share.
type mixFitter struct {
	src  Source
	s    mixSettings
	data *mixData
	pass *mixPass
	// structured is the data's covariance plus the floor, d×d, in the
	// fitted structure: the matrix of random starts and re-seeded
	// components.
	structured []float64
	spare      *mixModel
	empty      []int
}

func newMixFitter(src Source, s mixSettings, data *mixData) *mixFitter {
	d := data.d
	f := &mixFitter{
		src:        src,
		s:          s,
		data:       data,
		pass:       newMixPass(src, s.Workers, s.K, s.Covariance),
		structured: make([]float64, d*d),
		spare:      newMixModel(s.K, d, s.Covariance),
	}
	switch s.Covariance {
	case CovFull, CovPooled:
		copy(f.structured, data.cov)
	case CovDiag:
		for a := range d {
			f.structured[a*d+a] = data.cov[a*d+a]
		}
	case CovSpherical:
		for a := range d {
			f.structured[a*d+a] = data.meanVar
		}
	}
	for a := range d {
		f.structured[a*d+a] += data.floor
	}
	return f
}

// mixRun is the outcome of one restart.
type mixRun struct {
	restart   int
	kind      string
	model     *mixModel
	ll, ent   float64   // log-likelihood and class entropy under model
	nk        []float64 // memberships N_k under model
	iters     int
	converged bool
	stop      string
	trace     []float64 // mean log-likelihood per row, one per pass
	reseeded  []int     // passes whose maximisation step re-seeded a component
	reseeds   int
	events    []string
}

// restart runs EM from a start of the given kind, with the random stream
// (Seed, r).
func (f *mixFitter) restart(ctx context.Context, r int, kind string) (*mixRun, error) {
	run := &mixRun{restart: r, kind: kind}
	rng := rand.New(rand.NewPCG(f.s.Seed, uint64(r)))
	m, err := f.start(ctx, run, kind, rng)
	if err != nil {
		return run, fmt.Errorf("start: %w", err)
	}
	return run, f.em(ctx, run, m)
}

// maxMixReseeds is the number of re-seeds, per component, after which a
// restart is given up: a component that keeps losing its weight says the
// data do not support K components from that start.
const maxMixReseeds = 1

// em iterates from m until the mean log-likelihood per row changes by less
// than Tol or MaxIter maximisation steps have been taken. Pass t computes
// the log-likelihood under the parameters θ_t and the sums that give
// θ_{t+1}; when the test stops the run, θ_t is kept, so the reported
// parameters, log-likelihood, memberships and entropy all belong together.
// EM never lowers the log-likelihood (Dempster, Laird & Rubin 1977,
// Theorem 1). Two things here step outside that guarantee: re-seeds,
// which are recorded, and the floor λ, which makes each maximisation step
// the maximiser of the expected complete-data log-likelihood penalised by
// −(λ/2) Σ_k N_k tr Σ_k⁻¹ rather than of the plain one, so on slow runs
// the plain log-likelihood can dip by amounts that shrink with λ (seen:
// 1e-9 per row on unscaled data; none with Reg = 1e-14).
func (f *mixFitter) em(ctx context.Context, run *mixRun, m *mixModel) error {
	n := float64(f.data.n)
	cur, next := m, f.spare
	defer func() { f.spare = next }()
	prev := math.NaN()
	for it := 0; ; it++ {
		if err := ctx.Err(); err != nil {
			return err
		}
		st, err := f.pass.run(ctx, cur)
		if err != nil {
			return &mixFatal{fmt.Errorf("iteration %d: %w", it, err)}
		}
		if math.IsNaN(st.ll) || math.IsInf(st.ll, 0) {
			return fmt.Errorf("iteration %d: log-likelihood is %v", it, st.ll)
		}
		mean := st.ll / n
		run.trace = append(run.trace, mean)
		if f.s.Progress != nil {
			f.s.Progress(run.restart, it+1, st.ll)
		}
		stop := ""
		switch {
		case it > 0 && math.Abs(mean-prev) < f.s.Tol:
			stop = "log-likelihood change below tolerance"
			run.converged = true
		case it == f.s.MaxIter:
			stop = "iteration limit"
		}
		if stop != "" {
			run.stop = stop
			run.model = cur
			run.ll, run.ent = st.ll, st.ent
			run.nk = append([]float64(nil), st.nk...)
			return nil // cur now belongs to run; next becomes the spare
		}
		next.copyFrom(cur)
		cur.unwhiten(st)
		f.empty = next.mStep(st, cur.mean, f.data.floor, f.empty)
		if len(f.empty) > 0 {
			if err := f.reseed(run, next, st, f.empty, it+1); err != nil {
				return err
			}
			run.reseeded = append(run.reseeded, it)
		}
		if err := next.factor(); err != nil {
			return fmt.Errorf("iteration %d: %w", it+1, err)
		}
		cur, next = next, cur
		run.iters++
		prev = mean
	}
}

// reseed restarts the components in empty, which hold less than minMass
// rows' worth of membership after the pass st, at the rows the current
// model explains worst: the i-th empty component gets the row with the
// i-th lowest ln p(x) (ties by row position) as its mean, the data's
// covariance (structured) as its matrix (under the pooled structure the
// shared matrix is kept) and the weight 1/K, the other weights being
// scaled to make room. A component restarted with a negligible weight
// would only lose it again; with 1/K and the data's spread it takes over
// the rows around its new mean in the next pass. Each event is recorded.
// More than maxMixReseeds re-seeds per component in one restart is an
// error.
func (f *mixFitter) reseed(run *mixRun, m *mixModel, st *mixStats, empty []int, iter int) error {
	d := m.d
	if len(empty) > st.nw {
		return fmt.Errorf("iteration %d: %d components lost their weight, only %d rows to re-seed them", iter, len(empty), st.nw)
	}
	run.reseeds += len(empty)
	if run.reseeds > maxMixReseeds*m.k {
		return fmt.Errorf("iteration %d: components kept losing their weight (%d re-seeds)", iter, run.reseeds)
	}
	var kept float64
	for j, w := range m.w {
		if !slices.Contains(empty, j) {
			kept += w
		}
	}
	share := 1 / float64(m.k)
	scale := (1 - share*float64(len(empty))) / kept
	for j := range m.w {
		if slices.Contains(empty, j) {
			m.w[j] = share
		} else {
			m.w[j] *= scale
		}
	}
	for i, j := range empty {
		copy(m.mean[j*d:(j+1)*d], st.worstX[i*d:(i+1)*d])
		if m.cov != CovPooled {
			copy(m.sigma[j*d*d:(j+1)*d*d], f.structured)
		}
		run.events = append(run.events, fmt.Sprintf(
			"iteration %d: a component lost its weight (%.3g rows' worth); re-seeded at row %d, the row explained worst",
			iter, st.nk[j], st.worstRow[i]))
	}
	return nil
}
