package fit

import (
	"cmp"
	"slices"
)

// clusterOrder returns the order in which clusters are reported: by
// descending size (k-means: rows; mixtures: weight), ties by the
// lexicographic order of their centres, then by their index. out[to] is
// the index of the cluster reported in place to.
func clusterOrder[T cmp.Ordered](size []T, centres []float64, d int) []int {
	idx := make([]int, len(size))
	for j := range idx {
		idx[j] = j
	}
	slices.SortStableFunc(idx, func(a, b int) int {
		if c := cmp.Compare(size[b], size[a]); c != 0 {
			return c
		}
		return slices.Compare(centres[a*d:(a+1)*d], centres[b*d:(b+1)*d])
	})
	return idx
}
