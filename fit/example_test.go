package fit_test

import (
	"context"
	"fmt"

	"assort/fit"
)

func ExampleKMeans() {
	// Ten rows of two features (invented): a tight group near (1, 1), a
	// looser one near (8, 8) and two rows near (1, 9). By hand: centres
	// (4.1, 4.2)/4, (31.9, 32.2)/4 and (1.2, 8.8); inertia
	// 0.1375 + 0.8575 + 0.16 = 1.155. The first two groups tie on size and
	// are ordered by their centres.
	x := []float64{
		1.0, 1.2, 0.8, 1.0, 1.1, 0.9, 1.2, 1.1,
		7.5, 8.0, 8.5, 8.2, 8.0, 7.6, 7.9, 8.4,
		1.0, 9.0, 1.4, 8.6,
	}
	src := fit.NewDense(x, 2)

	// Features on different scales would first go through FitScaling and
	// Scaling.Apply; these share one scale.
	res, err := fit.KMeans(context.Background(), src, fit.KMeansConfig{K: 3, Seed: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	for j := range res.K {
		c := res.Centers[j*res.D : (j+1)*res.D]
		// Clusters are numbered from 1 at the boundary.
		fmt.Printf("cluster %d: %d rows, centre (%.3f, %.3f)\n", j+1, res.Sizes[j], c[0], c[1])
	}
	fmt.Printf("inertia %.4f after %d iterations (%s)\n", res.Inertia, res.Iterations, res.Stop)

	// Label new rows with the fitted centres.
	label, d2 := fit.Nearest(res.Centers, res.D, []float64{7, 7})
	fmt.Printf("(7, 7) joins cluster %d at squared distance %.3f\n", label+1, d2)
	// Output:
	// cluster 1: 4 rows, centre (1.025, 1.050)
	// cluster 2: 4 rows, centre (7.975, 8.050)
	// cluster 3: 2 rows, centre (1.200, 8.800)
	// inertia 1.1550 after 2 iterations (assignments unchanged)
	// (7, 7) joins cluster 2 at squared distance 2.053
}
