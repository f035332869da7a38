package main

import (
	"context"
	"math"

	"assort/fit"
	"assort/schema"
)

// fitKMeans fits k-means and assigns every row to its nearest centre.
func fitKMeans(ctx context.Context, s *fitSpec, src *fit.Dense, sc fit.Scaling, m *schema.Model) (*fitted, error) {
	res, err := fit.KMeans(ctx, src, fit.KMeansConfig{
		K: s.k, Seed: s.seed, Restarts: s.restarts, MaxIter: s.maxIter, Tol: s.tol, Workers: s.workers,
	})
	if err != nil {
		return nil, err
	}
	m.Algorithm = "lloyd, greedy k-means++ seeding"
	m.Inertia = &res.Inertia
	m.Iterations, m.Converged, m.StopReason = res.Iterations, res.Converged, res.Stop

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
	return out, nil
}

// fitMixture fits a Gaussian mixture by EM and computes every row's
// memberships, hard label, log density and Mahalanobis distance.
func fitMixture(ctx context.Context, s *fitSpec, src *fit.Dense, sc fit.Scaling, m *schema.Model) (*fitted, error) {
	res, err := fit.Mixture(ctx, src, fit.MixtureConfig{
		K: s.k, Covariance: fit.Covariance(s.covariance), Reg: s.reg, Seed: s.seed,
		Restarts: s.restarts, Init: s.init, MaxIter: s.maxIter, Tol: s.tol, Workers: s.workers,
	})
	if err != nil {
		return nil, err
	}
	m.Algorithm = "EM, " + s.covariance + " covariance"
	m.LogLikelihood, m.BIC, m.AIC = &res.LogLikelihood, &res.BIC, &res.AIC
	m.Params = res.Params
	m.Iterations, m.Converged, m.StopReason = res.Iterations, res.Converged, res.Stop
	m.Events = res.Events

	n, d, k := src.N, src.D, res.K
	out := &fitted{
		cluster:     make([]int32, n),
		probability: make([]float64, n),
		distance:    make([]float64, n),
		logDensity:  make([]float64, n),
		memberships: make([]float64, n*k),
		floor:       s.floor,
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
	return out, nil
}
