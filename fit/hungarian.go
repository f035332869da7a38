package fit

import (
	"fmt"
	"math"
)

// Assignment solves the rectangular linear assignment problem: given an r×c
// cost matrix C (row-major in cost, C_ij = cost[i*c+j]) it finds a one-to-one
// matching σ of min(r, c) rows to distinct columns that minimises
//
//	total = Σ_{i matched} C_{i,σ(i)}.
//
// match[i] is the column of row i, or -1 when r > c and row i is left over.
// total is summed in row order from the original costs. cost is not
// modified.
//
// Method: the Hungarian method of Kuhn (1955, Naval Research Logistics
// Quarterly 2, 83–97) and Munkres (1957, J. SIAM 5(1), 32–38) in its
// O(r²c) shortest-augmenting-path form (Jonker & Volgenant 1987, Computing
// 38, 325–340): rows are added one at a time, and each addition runs a
// Dijkstra search over columns on the reduced costs C_ij − u_i − v_j, where
// u and v are dual potentials kept feasible (C_ij − u_i − v_j ≥ 0) and
// tight on matched pairs, so each augmentation keeps the partial matching
// optimal. A rectangular problem with more rows than columns is solved on
// its transpose, so the search always runs with rows ≤ columns, which is
// the standard reduction for rectangular problems (Bourgeois & Lassalle
// 1971, Comm. ACM 14(12), 802–804).
//
// Ties are broken towards the lowest column index during the search, so the
// result is deterministic; among several optimal matchings any one may be
// returned.
//
// Costs must be finite: a NaN or ±Inf entry, a negative dimension or a
// slice whose length is not r·c is programmer misuse and panics. Costs of a
// magnitude near math.MaxFloat64 can overflow the potentials; scale them
// first.
func Assignment(cost []float64, r, c int) (match []int, total float64) {
	if r < 0 || c < 0 {
		panic(fmt.Sprintf("fit: assignment of %d×%d matrix", r, c))
	}
	if len(cost) != r*c {
		panic(fmt.Sprintf("fit: assignment cost has %d entries, want %d×%d = %d", len(cost), r, c, r*c))
	}
	for idx, v := range cost {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			panic(fmt.Sprintf("fit: assignment cost[%d][%d] is %v", idx/c, idx%c, v))
		}
	}
	match = make([]int, r)
	for i := range match {
		match[i] = -1
	}
	if r == 0 || c == 0 {
		return match, 0
	}
	if r <= c {
		copy(match, shortestAugmenting(cost, r, c))
	} else {
		// Transpose: columns become the rows of the search.
		t := make([]float64, len(cost))
		for i := range r {
			for j := range c {
				t[j*r+i] = cost[i*c+j]
			}
		}
		rowOf := shortestAugmenting(t, c, r)
		for j, i := range rowOf {
			match[i] = j
		}
	}
	for i, j := range match {
		if j >= 0 {
			total += cost[i*c+j]
		}
	}
	return match, total
}

// shortestAugmenting matches each of the n rows of the n×m row-major matrix
// a (m ≥ n) to a distinct column at least total cost and returns the column
// of each row.
// It is the O(n²m) potential-based form described on Assignment; arrays are
// indexed from 1 with column 0 a virtual column that holds the row being
// inserted.
func shortestAugmenting(a []float64, n, m int) []int {
	u := make([]float64, n+1)    // row potentials
	v := make([]float64, m+1)    // column potentials
	p := make([]int, m+1)        // p[j]: row (1-based) matched to column j, 0 if free
	way := make([]int, m+1)      // predecessor column on the shortest path
	minv := make([]float64, m+1) // shortest reduced distance to column j so far
	used := make([]bool, m+1)
	for i := 1; i <= n; i++ {
		p[0] = i
		j0 := 0
		for j := range minv {
			minv[j] = math.Inf(1)
			used[j] = false
		}
		for {
			used[j0] = true
			i0 := p[j0]
			row := a[(i0-1)*m : i0*m]
			ui := u[i0]
			delta := math.Inf(1)
			j1 := 0
			for j := 1; j <= m; j++ {
				if used[j] {
					continue
				}
				if cur := row[j-1] - ui - v[j]; cur < minv[j] {
					minv[j] = cur
					way[j] = j0
				}
				if minv[j] < delta {
					delta = minv[j]
					j1 = j
				}
			}
			for j := 0; j <= m; j++ {
				if used[j] {
					u[p[j]] += delta
					v[j] -= delta
				} else {
					minv[j] -= delta
				}
			}
			j0 = j1
			if p[j0] == 0 {
				break
			}
		}
		// Augment along the path back to the virtual column.
		for j0 != 0 {
			j1 := way[j0]
			p[j0] = p[j1]
			j0 = j1
		}
	}
	colOf := make([]int, n)
	for j := 1; j <= m; j++ {
		if p[j] != 0 {
			colOf[p[j]-1] = j - 1
		}
	}
	return colOf
}
