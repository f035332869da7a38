package fit_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"assort/fit"
)

// ExampleMixture fits two full-covariance components to invented data: 300
// rows around (0, 0) and 100 rows around (5, 5), then scores a new row.
func ExampleMixture() {
	rng := rand.New(rand.NewPCG(1, 2))
	var x []float64
	for i := range 400 {
		c := 0.0
		if i%4 == 3 {
			c = 5
		}
		x = append(x, c+rng.NormFloat64(), c+0.5*rng.NormFloat64())
	}
	res, err := fit.Mixture(context.Background(), fit.NewDense(x, 2), fit.MixtureConfig{K: 2, Seed: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	for k := range res.K {
		fmt.Printf("component %d: weight %.2f, mean (%.2f, %.2f)\n", k+1, res.Weights[k], res.Means[2*k], res.Means[2*k+1])
	}
	tau := make([]float64, res.K)
	label, prob, _, _ := res.Posterior(tau, []float64{4.5, 4.8})
	fmt.Printf("row (4.5, 4.8): component %d, membership %.3f\n", label+1, prob)
	fmt.Println("converged:", res.Converged, "parameters:", res.Params)
	// Output:
	// component 1: weight 0.75, mean (-0.02, -0.01)
	// component 2: weight 0.25, mean (5.11, 5.01)
	// row (4.5, 4.8): component 2, membership 1.000
	// converged: true parameters: 11
}
