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

// fitCandidate fits one k with the spec's method and computes its
// criteria.
func fitCandidate(ctx context.Context, s *fitSpec, src *fit.Dense, k int) (*candidate, error) {
	c := &candidate{k: k}
	n, d := src.N, src.D
	switch s.method {
	case "kmeans":
		res, err := fit.KMeans(ctx, src, fit.KMeansConfig{
			K: k, Seed: s.seed, Restarts: s.restarts, MaxIter: s.maxIter, Tol: s.tol, Workers: s.workers,
		})
		if err != nil {
			return nil, err
		}
		c.km = res
		logL, p, bic := fit.KMeansBIC(n, d, res.Sizes, res.Inertia)
		aic := -2*logL + 2*float64(p)
		c.inertia, c.logL, c.params, c.bic, c.aic = &res.Inertia, &logL, p, &bic, &aic
		labels := make([]int32, n)
		fit.Assign(labels, nil, res.Centers, d, src.X)
		sil, err := fit.Silhouette(ctx, src, labels, k, 0, s.seed, s.workers)
		if err != nil {
			return nil, err
		}
		c.silhouette = &sil
	case "gmm":
		res, err := fit.Mixture(ctx, src, fit.MixtureConfig{
			K: k, Covariance: fit.Covariance(s.covariance), Reg: s.reg, Seed: s.seed,
			Restarts: s.restarts, Init: s.init, MaxIter: s.maxIter, Tol: s.tol, Workers: s.workers,
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
	var p *float64
	lowerBetter = true
	switch name {
	case "bic":
		p = c.bic
	case "aic":
		p = c.aic
	case "icl":
		p = c.icl
	case "silhouette":
		p, lowerBetter = c.silhouette, false
	}
	if p == nil || math.IsNaN(*p) || math.IsInf(*p, 0) {
		return 0, lowerBetter, false
	}
	return *p, lowerBetter, true
}

// record copies the chosen candidate's figures into the model row.
func (c *candidate) record(m *schema.Model, s *fitSpec) {
	m.K = c.k
	m.Iterations, m.Converged, m.StopReason = c.iterations()
	if c.km != nil {
		m.Algorithm = "lloyd, greedy k-means++ seeding"
		m.Inertia = c.inertia
		return
	}
	m.Algorithm = "EM, " + s.covariance + " covariance"
	m.LogLikelihood, m.BIC, m.AIC = c.logL, c.bic, c.aic
	m.Params = c.params
	m.Events = c.mx.Events
}

// score computes every row's outputs under the candidate's model and its
// components in original units. sc is the scaling the fit used.
func (c *candidate) score(src *fit.Dense, sc fit.Scaling, floor float64) *fitted {
	if c.km != nil {
		return scoreKMeans(c.km, src, sc)
	}
	return scoreMixture(c.mx, src, sc, floor)
}

func scoreKMeans(res *fit.KMeansResult, src *fit.Dense, sc fit.Scaling) *fitted {
	n, d := src.N, src.D
	labels := make([]int32, n)
	dist := make([]float64, n)
	fit.Assign(labels, dist, res.Centers, d, src.X)
	out := &fitted{cluster: labels, distance: dist}
	sizes := make([]int64, res.K)
	for i := range labels {
		sizes[labels[i]]++
		labels[i]++
		dist[i] = math.Sqrt(dist[i])
	}
	for j := range res.K {
		c := make([]float64, d)
		sc.Invert(c, res.Centers[j*d:(j+1)*d])
		out.components = append(out.components, schema.Component{
			Cluster: j + 1, Size: sizes[j], Weight: float64(sizes[j]) / float64(n), Center: c,
			FittedCenter: res.Centers[j*d : (j+1)*d],
		})
	}
	return out
}

func scoreMixture(res *fit.MixtureResult, src *fit.Dense, sc fit.Scaling, floor float64) *fitted {
	n, d, k := src.N, src.D, res.K
	out := &fitted{
		cluster:     make([]int32, n),
		probability: make([]float64, n),
		distance:    make([]float64, n),
		logDensity:  make([]float64, n),
		memberships: make([]float64, n*k),
		floor:       floor,
	}
	sizes := make([]int64, k)
	for i := range n {
		label, p, logd, mahal := res.Posterior(out.memberships[i*k:(i+1)*k], src.Row(i))
		out.cluster[i] = int32(label + 1)
		out.probability[i], out.logDensity[i], out.distance[i] = p, logd, mahal
		sizes[label]++
	}
	means, covs := res.Unscale(sc.Center, sc.Spread)
	for j := range k {
		out.components = append(out.components, schema.Component{
			Cluster: j + 1, Size: sizes[j], Weight: res.Weights[j],
			Center: means[j*d : (j+1)*d], Covariance: covs[j*d*d : (j+1)*d*d],
			FittedCenter: res.Means[j*d : (j+1)*d], FittedCovariance: res.Covs[j*d*d : (j+1)*d*d],
		})
	}
	return out
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
