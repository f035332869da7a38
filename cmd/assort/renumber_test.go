package main

import (
	"testing"

	"assort/fit"
	"assort/schema"
)

// TestRenumberScoresInClusterOrder builds, by hand, a new version whose
// clusters are fitted in the opposite order to the numbers they take from
// the published version (centre 10 fitted first but matched to cluster 2,
// centre 0 to cluster 1), and scores a row at 5, exactly as near to both:
// after renumbering the fit's own scoring must give it cluster 1, the
// lower number, as `score` and the SQL functions do (they scan the stored
// components in cluster order and keep the first of equal distances).
// Rows off the tie keep their nearest centre.
func TestRenumberScoresInClusterOrder(t *testing.T) {
	prev := []schema.Component{{Cluster: 1, Center: []float64{0}}, {Cluster: 2, Center: []float64{10}}}
	none := fit.Scaling{Method: "none", Center: []float64{0}, Spread: []float64{1}}
	spherical, err := fit.RestoreMixture(fit.CovSpherical, 1, []float64{0.5, 0.5}, []float64{10, 0}, []float64{4, 4})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name  string
		model *scoringModel
	}{
		{"kmeans", &scoringModel{k: 2, d: 1, centers: []float64{10, 0}}},
		{"gmm", &scoringModel{k: 2, d: 1, mx: spherical}},
	} {
		t.Run(c.name, func(t *testing.T) {
			out := &fitted{
				components: []schema.Component{{FittedCenter: []float64{10}}, {FittedCenter: []float64{0}}},
				model:      c.model,
			}
			if cost := renumber(out, prev, none); cost != 0 {
				t.Fatalf("matching cost %v, want 0 (the centres coincide)", cost)
			}
			if got := []int{out.components[0].Cluster, out.components[1].Cluster}; got[0] != 1 || got[1] != 2 ||
				out.components[0].FittedCenter[0] != 0 || out.components[0].FittedOrder != 2 {
				t.Fatalf("components after renumbering %+v, want cluster 1 at 0 (fitted second), then cluster 2", out.components)
			}
			b := &batch{n: 4, x: []float64{5, 1, 9, -3}}
			out.model.results(b, make([]float64, 2))
			want := []int32{1, 1, 2, 1}
			for i, l := range b.label {
				if got := out.number(int(l)); got != want[i] {
					t.Errorf("row at %v: cluster %d, want %d", b.x[i], got, want[i])
				}
			}
			// Euclidean for k-means; Mahalanobis 5/√4 for the mixture.
			if wantDist := map[string]float64{"kmeans": 5, "gmm": 2.5}[c.name]; b.dist[0] != wantDist {
				t.Errorf("row at 5: distance %v, want %v", b.dist[0], wantDist)
			}
		})
	}
}
