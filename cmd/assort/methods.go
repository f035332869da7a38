package main

import (
	"context"
	"fmt"
	"math"

	"assort/fit"
	"assort/schema"
)

// candidate is one fitted number of clusters with its criteria; pointers
// are nil where a criterion does not apply to the method.
type candidate struct {
	k  int
	km *fit.KMeansResult
	mx *fit.MixtureResult

	inertia    *float64
	logL       *float64
	params     int
	bic, aic   *float64
	icl        *float64
	silhouette *float64
}

// fitCandidate fits one k with the spec's method on src (scaled rows)
// and computes its criteria. algorithm is the k-means iterations the
// memory plan allows; sil is the silhouette's sample of src (k-means).
func fitCandidate(ctx context.Context, s *fitSpec, src fit.Source, k int, algorithm string, sil *fit.Dense, progress fit.Progress) (*candidate, error) {
	c := &candidate{k: k}
	n, d := src.Len(), src.Dim()
	switch s.method {
	case "kmeans":
		res, err := fit.KMeans(ctx, src, fit.KMeansConfig{
			K: k, Seed: s.seed, Restarts: s.restarts, MaxIter: s.maxIter, Tol: s.tol, Workers: s.workers,
			Algorithm: algorithm, Seeding: seeding(s.seeding), Progress: progress,
		})
		if err != nil {
			return nil, err
		}
		c.km = res
		logL, p, bic := fit.KMeansBIC(n, d, res.Sizes, res.Inertia)
		aic := -2*logL + 2*float64(p)
		c.inertia, c.logL, c.params, c.bic, c.aic = &res.Inertia, &logL, p, &bic, &aic
		labels := make([]int32, sil.N)
		fit.Assign(labels, nil, res.Centers, d, sil.X)
		v, err := fit.Silhouette(ctx, sil, labels, k, sil.N, s.seed, s.workers)
		if err != nil {
			return nil, err
		}
		c.silhouette = &v
	case "gmm":
		res, err := fit.Mixture(ctx, src, fit.MixtureConfig{
			K: k, Covariance: fit.Covariance(s.covariance), Reg: s.reg, Seed: s.seed,
			Restarts: s.restarts, Init: s.init, MaxIter: s.maxIter, Tol: s.tol, Workers: s.workers,
			Progress: progress,
		})
		if err != nil {
			return nil, err
		}
		c.mx = res
		icl := fit.ICL(res.BIC, res.ClassEntropy)
		c.logL, c.params, c.bic, c.aic, c.icl = &res.LogLikelihood, res.Params, &res.BIC, &res.AIC, &icl
	}
	return c, nil
}

// silhouetteStream is mixed into the seed of the silhouette's sample, so
// that it differs from other draws seeded with the same --seed.
const silhouetteStream = 0x73696c686f756574 // "silhouet"

// silhouetteSample draws the rows the silhouette criterion is estimated
// on: a uniform sample of fit.DefaultSilhouetteSample rows of src
// (fit.Reservoir, one pass, seeded from seed). The silhouette of a
// candidate is then that of its partition of the sample, exactly: the
// estimate fit.Silhouette would make by sampling itself (common practice:
// the silhouette over all n rows needs n² distances), without a label per
// row of the table.
func silhouetteSample(ctx context.Context, src fit.Source, seed uint64) (*fit.Dense, error) {
	d := src.Dim()
	res := fit.NewReservoir(fit.DefaultSilhouetteSample, d, seed^silhouetteStream)
	buf := make([]float64, 0, storeChunkRows*d)
	for c := range src.Chunks() {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		rows, _, err := src.Chunk(c, buf)
		if err != nil {
			return nil, fmt.Errorf("silhouette sample: %w", err)
		}
		res.Add(rows)
	}
	return res.Sample(), nil
}

// seeding turns --seeding into fit's setting; "auto" is fit's default.
func seeding(flag string) string {
	if flag == "auto" {
		return ""
	}
	return flag
}

// iterations, converged and stop describe the candidate's winning run.
func (c *candidate) iterations() (int, bool, string) {
	if c.km != nil {
		return c.km.Iterations, c.km.Converged, c.km.Stop
	}
	return c.mx.Iterations, c.mx.Converged, c.mx.Stop
}

// criterion returns the candidate's value of a criterion and whether lower
// is better; ok is false when the criterion is missing or not finite.
func (c *candidate) criterion(name string) (v float64, lowerBetter, ok bool) {
	lowerBetter = name != "silhouette"
	p := c.row(false).Criterion(name)
	if p == nil || math.IsNaN(*p) || math.IsInf(*p, 0) {
		return 0, lowerBetter, false
	}
	return *p, lowerBetter, true
}

// row is the candidate as a registry row.
func (c *candidate) row(chosen bool) schema.Candidate {
	it, conv, _ := c.iterations()
	return schema.Candidate{
		K: c.k, Inertia: c.inertia, LogLikelihood: c.logL, Params: c.params,
		BIC: c.bic, AIC: c.aic, ICL: c.icl, Silhouette: c.silhouette,
		Iterations: it, Converged: conv, Chosen: chosen,
	}
}

// record copies the chosen candidate's figures into the model row.
func (c *candidate) record(m *schema.Model, s *fitSpec) {
	m.K = c.k
	m.Iterations, m.Converged, m.StopReason = c.iterations()
	if c.km != nil {
		m.Algorithm = c.km.Algorithm
		m.Inertia = c.inertia
		return
	}
	m.Algorithm = "EM, " + s.covariance + " covariance"
	m.LogLikelihood, m.BIC, m.AIC = c.logL, c.bic, c.aic
	m.Params = c.params
	m.Events = c.mx.Events
}

// objective describes the candidate's objective, for the log.
func (c *candidate) objective() string {
	if c.km != nil {
		return fmt.Sprintf("inertia %.6g", c.km.Inertia)
	}
	return fmt.Sprintf("log-likelihood %.6g", c.mx.LogLikelihood)
}

// fitted returns the candidate's model ready to score rows of d features,
// and its components in original units; sc is the scaling the fit used.
// The components' sizes (and a k-means component's weight) are counted by
// the results pass (fitted.setSizes).
func (c *candidate) fitted(d int, sc fit.Scaling, floor float64) *fitted {
	if c.km != nil {
		res := c.km
		out := &fitted{model: &scoringModel{k: res.K, d: d, centers: res.Centers}}
		for j := range res.K {
			center := make([]float64, d)
			sc.Invert(center, res.Centers[j*d:(j+1)*d])
			out.components = append(out.components, schema.Component{
				Cluster: j + 1, Center: center, FittedCenter: res.Centers[j*d : (j+1)*d],
			})
		}
		return out
	}
	res := c.mx
	out := &fitted{model: &scoringModel{k: res.K, d: d, mx: res}, floor: floor}
	means, covs := res.Unscale(sc.Center, sc.Spread)
	for j := range res.K {
		out.components = append(out.components, schema.Component{
			Cluster: j + 1, Weight: res.Weights[j],
			Center: means[j*d : (j+1)*d], Covariance: covs[j*d*d : (j+1)*d*d],
			FittedCenter: res.Means[j*d : (j+1)*d], FittedCovariance: res.Covs[j*d*d : (j+1)*d*d],
		})
	}
	return out
}

// scoringModel is a fitted model as the scoring passes use it, in the
// units of the fit (scaled rows). Its methods compute a batch's outputs;
// they may run on several goroutines at once, on different batches.
type scoringModel struct {
	k, d    int
	centers []float64          // k-means: k×d centres
	mx      *fit.MixtureResult // mixtures
}

// reordered returns the model with its components in the given order:
// component to is sm's component order[to], parameters copied bit for
// bit (fit.MixtureResult.Reordered for mixtures).
func (sm *scoringModel) reordered(order []int) *scoringModel {
	out := &scoringModel{k: sm.k, d: sm.d}
	if sm.mx != nil {
		out.mx = sm.mx.Reordered(order)
		return out
	}
	d := sm.d
	out.centers = make([]float64, 0, len(sm.centers))
	for _, j := range order {
		out.centers = append(out.centers, sm.centers[j*d:(j+1)*d]...)
	}
	return out
}

// results computes every row's fitted cluster (0-based) and distance to
// its centre: Euclidean for k-means (fit.Assign, the same arithmetic as
// the fit's), Mahalanobis for mixtures, with the row's membership of that
// cluster and its log density (fit.MixtureResult.Posterior). scratch holds
// k values.
func (sm *scoringModel) results(b *batch, scratch []float64) {
	b.outputs(sm.k, false)
	d := sm.d
	if sm.mx == nil {
		fit.Assign(b.label, b.dist, sm.centers, d, b.x[:b.n*d])
		for i, v := range b.dist {
			b.dist[i] = math.Sqrt(v)
		}
		return
	}
	sm.posteriors(b, func(int) []float64 { return scratch[:sm.k] })
}

// posteriors scores every row of b under the mixture, writing its
// memberships into mem(i) and its hard outputs into b.
func (sm *scoringModel) posteriors(b *batch, mem func(i int) []float64) {
	d := sm.d
	for i := range b.n {
		label, p, logd, mahal := sm.mx.Posterior(mem(i), b.x[i*d:(i+1)*d])
		b.label[i], b.prob[i], b.logd[i], b.dist[i] = int32(label), p, logd, mahal
	}
}

// memberships computes every row's memberships of the k components of a
// mixture into b.mem, and its hard outputs as results does.
func (sm *scoringModel) memberships(b *batch, _ []float64) {
	b.outputs(sm.k, true)
	k := sm.k
	sm.posteriors(b, func(i int) []float64 { return b.mem[i*k : (i+1)*k] })
}

// choose returns the index of the best candidate by criterion, the
// smallest k among equals. It returns -1 when no candidate has a finite
// value.
func choose(cs []*candidate, criterion string) int {
	best := -1
	var bestV float64
	for i, c := range cs {
		v, lower, ok := c.criterion(criterion)
		if !ok {
			continue
		}
		if best < 0 || (lower && v < bestV) || (!lower && v > bestV) {
			best, bestV = i, v
		}
	}
	return best
}

// restoreMixture rebuilds a stored mixture from its fitted-space
// parameters, components in cluster order.
func restoreMixture(m *schema.Model, comps []schema.Component) (*fit.MixtureResult, error) {
	d := len(m.Features)
	k := len(comps)
	weights := make([]float64, k)
	means := make([]float64, 0, k*d)
	covs := make([]float64, 0, k*d*d)
	for j, c := range comps {
		weights[j] = c.Weight
		means = append(means, c.FittedCenter...)
		covs = append(covs, c.FittedCovariance...)
	}
	mx, err := fit.RestoreMixture(fit.Covariance(m.Covariance), d, weights, means, covs)
	if err != nil {
		return nil, fmt.Errorf("%s@%d: %w", m.Name, m.Version, err)
	}
	return mx, nil
}
