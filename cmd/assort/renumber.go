package main

import (
	"fmt"
	"slices"

	"assort/fit"
	"assort/schema"
)

// renumber gives the clusters of a new version the numbers of their
// counterparts in the previously published version, so that the same
// population keeps its number across refits.
//
// Basis: the centres. Both versions' centres are put in the new version's
// fitted space (the previous centres, stored in original units, are scaled
// with the new version's centring and spread), and the cost of pairing new
// cluster i with previous cluster j is the squared Euclidean distance
// between their centres. The Hungarian method (fit.Assignment; Kuhn 1955)
// finds the pairing of least total cost; with different k it is
// rectangular, and clusters left without a counterpart get the next numbers
// above the previous version's largest. Centres are used rather than shared
// rows because they exist for every pair of versions, even when the two
// fits saw different rows.
//
// It renumbers out.components and sorts them by number, puts out.model's
// components in the same order, sets out.numbers (which the scoring passes
// apply as they encode rows) to match, and returns the total cost.
func renumber(out *fitted, prev []schema.Component, sc fit.Scaling) float64 {
	k, kp := len(out.components), len(prev)
	d := len(out.components[0].FittedCenter)
	prevFitted := make([]float64, kp*d)
	for j, p := range prev {
		sc.Apply(prevFitted[j*d:(j+1)*d], p.Center)
	}
	cost := make([]float64, k*kp)
	for i, c := range out.components {
		for j := range kp {
			var s float64
			for f, x := range c.FittedCenter {
				diff := x - prevFitted[j*d+f]
				s += diff * diff
			}
			cost[i*kp+j] = s
		}
	}
	match, total := fit.Assignment(cost, k, kp)
	next := 0
	for _, p := range prev {
		next = max(next, p.Cluster)
	}
	numbers := make([]int32, k) // by fitted order (index)
	for i := range out.components {
		c := &out.components[i]
		c.FittedOrder = i + 1
		if j := match[i]; j >= 0 {
			numbers[i] = int32(prev[j].Cluster)
			mc, cost := prev[j].Cluster, cost[i*kp+j]
			c.MatchedCluster, c.MatchCost = &mc, &cost
		} else {
			next++
			numbers[i] = int32(next)
		}
		c.Cluster = int(numbers[i])
	}
	slices.SortFunc(out.components, func(a, b schema.Component) int { return a.Cluster - b.Cluster })
	// Score in cluster order from here on, as `score` and the SQL
	// functions score with the stored version: a row exactly as near to
	// two centres then gets the same (lower-numbered) cluster from all
	// three.
	order := make([]int, k)
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(a, b int) int { return int(numbers[a]) - int(numbers[b]) })
	out.model = out.model.reordered(order)
	out.numbers = make([]int32, k)
	for to, from := range order {
		out.numbers[to] = numbers[from]
	}
	return total
}

// sameFeatures reports whether two versions use the same features in the
// same order, so that their centres can be compared.
func sameFeatures(a, b []string) error {
	if !slices.Equal(a, b) {
		return fmt.Errorf("features differ (%v and %v)", a, b)
	}
	return nil
}
