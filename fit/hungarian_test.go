package fit

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// bruteAssignment returns the least total cost over every one-to-one
// matching of min(r, c) rows to columns, by enumeration.
func bruteAssignment(cost []float64, r, c int) float64 {
	best := math.Inf(1)
	if r <= c {
		used := make([]bool, c)
		var rec func(i int, sum float64)
		rec = func(i int, sum float64) {
			if i == r {
				best = min(best, sum)
				return
			}
			for j := range c {
				if !used[j] {
					used[j] = true
					rec(i+1, sum+cost[i*c+j])
					used[j] = false
				}
			}
		}
		rec(0, 0)
		return best
	}
	used := make([]bool, r)
	var rec func(j int, sum float64)
	rec = func(j int, sum float64) {
		if j == c {
			best = min(best, sum)
			return
		}
		for i := range r {
			if !used[i] {
				used[i] = true
				rec(j+1, sum+cost[i*c+j])
				used[i] = false
			}
		}
	}
	rec(0, 0)
	return best
}

// checkMatching fails unless match is a one-to-one matching of min(r, c)
// rows to columns whose cost is total.
func checkMatching(t *testing.T, cost []float64, r, c int, match []int, total float64) {
	t.Helper()
	if len(match) != r {
		t.Fatalf("len(match) = %d, want %d", len(match), r)
	}
	seen := make(map[int]bool)
	var sum float64
	for i, j := range match {
		if j == -1 {
			continue
		}
		if j < 0 || j >= c || seen[j] {
			t.Fatalf("match = %v: row %d has column %d (out of range or repeated)", match, i, j)
		}
		seen[j] = true
		sum += cost[i*c+j]
	}
	if len(seen) != min(r, c) {
		t.Fatalf("match = %v matches %d rows, want %d", match, len(seen), min(r, c))
	}
	if sum != total {
		t.Fatalf("total = %v but the matched costs sum to %v", total, sum)
	}
}

func TestAssignmentHand(t *testing.T) {
	// Optima worked out by hand by listing every matching.
	tests := []struct {
		name  string
		r, c  int
		cost  []float64
		match []int
		total float64
	}{
		{"1x1", 1, 1, []float64{7}, []int{0}, 7},
		// Rows 0→1 (1), 1→0 (2), 2→2 (2) = 5; the other five
		// permutations cost 6, 11, 9, 7 and 6.
		{"3x3", 3, 3, []float64{4, 1, 3, 2, 0, 5, 3, 2, 2}, []int{1, 0, 2}, 5},
		// The greedy choice of the smallest entry (row 0→0, cost 1) is
		// wrong: 1+4 = 5 > 2+2 = 4.
		{"2x3 wide", 2, 3, []float64{1, 2, 3, 2, 4, 6}, []int{1, 0}, 4},
		// The transpose of the above: row 2 is left over.
		{"3x2 tall", 3, 2, []float64{1, 2, 2, 4, 3, 6}, []int{1, 0, -1}, 4},
		{"1x4 picks the minimum", 1, 4, []float64{3, -2, 5, -2}, []int{1}, -2},
		{"4x1 picks the minimum", 4, 1, []float64{3, 9, -1, 4}, []int{-1, -1, 0, -1}, -1},
		// Negative costs, anti-diagonal optimum: -5 + -5 + -5.
		{"negative", 3, 3, []float64{0, 0, -5, 0, -5, 0, -5, 0, 0}, []int{2, 1, 0}, -15},
		{"empty rows", 0, 3, nil, []int{}, 0},
		{"empty cols", 2, 0, nil, []int{-1, -1}, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			match, total := Assignment(tc.cost, tc.r, tc.c)
			if fmt.Sprint(match) != fmt.Sprint(tc.match) || total != tc.total {
				t.Errorf("Assignment = %v, %v; want %v, %v", match, total, tc.match, tc.total)
			}
		})
	}
}

func TestAssignmentTies(t *testing.T) {
	// Matrices with many optimal matchings: any valid one with the optimal
	// total is right, and repeated calls must agree.
	tests := []struct {
		name  string
		r, c  int
		cost  []float64
		total float64
	}{
		{"all equal 3x3", 3, 3, []float64{1, 1, 1, 1, 1, 1, 1, 1, 1}, 3},
		{"all zero 2x4", 2, 4, make([]float64, 8), 0},
		{"all zero 4x2", 4, 2, make([]float64, 8), 0},
		// Two optimal matchings of cost 2: identity and swap.
		{"two optima", 2, 2, []float64{1, 1, 1, 1}, 2},
		{"repeated rows", 3, 3, []float64{1, 2, 3, 1, 2, 3, 1, 2, 3}, 6},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			match, total := Assignment(tc.cost, tc.r, tc.c)
			checkMatching(t, tc.cost, tc.r, tc.c, match, total)
			if total != tc.total {
				t.Errorf("total = %v, want %v", total, tc.total)
			}
			again, _ := Assignment(tc.cost, tc.r, tc.c)
			if fmt.Sprint(again) != fmt.Sprint(match) {
				t.Errorf("second call gave %v, first %v", again, match)
			}
		})
	}
}

func TestAssignmentBruteForce(t *testing.T) {
	// Exhaustive enumeration is the reference: 720 permutations for 6×6,
	// 360 injections for 4×6 and 6×4.
	shapes := []struct{ r, c int }{{6, 6}, {4, 6}, {6, 4}, {5, 5}, {3, 6}}
	for _, sh := range shapes {
		for seed := uint64(1); seed <= 20; seed++ {
			for _, integer := range []bool{false, true} {
				name := fmt.Sprintf("%dx%d seed %d integer %v", sh.r, sh.c, seed, integer)
				t.Run(name, func(t *testing.T) {
					rng := rand.New(rand.NewPCG(seed, 7))
					cost := make([]float64, sh.r*sh.c)
					for i := range cost {
						if integer {
							cost[i] = float64(rng.IntN(4)) // many ties
						} else {
							cost[i] = rng.NormFloat64() * 10
						}
					}
					match, total := Assignment(cost, sh.r, sh.c)
					checkMatching(t, cost, sh.r, sh.c, match, total)
					if want := bruteAssignment(cost, sh.r, sh.c); math.Abs(total-want) > 1e-12*(1+math.Abs(want)) {
						t.Errorf("total = %v, brute force %v", total, want)
					}
				})
			}
		}
	}
}

func TestAssignmentReference(t *testing.T) {
	// Optimal totals from scipy.optimize.linear_sum_assignment (scipy
	// 1.10.1), recorded by testdata/reference/agreement.py in
	// testdata/agreement_reference.json: sizes beyond enumeration,
	// rectangular both ways, integer costs with many ties.
	ref := loadAgreementReference(t)
	for _, tc := range ref.Assignment {
		t.Run(tc.Name, func(t *testing.T) {
			match, total := Assignment(tc.Cost, tc.Rows, tc.Cols)
			checkMatching(t, tc.Cost, tc.Rows, tc.Cols, match, total)
			if total != tc.Total {
				t.Errorf("total = %v, scipy %v", total, tc.Total)
			}
		})
	}
}

func TestAssignmentDoesNotModifyCost(t *testing.T) {
	cost := []float64{3, 1, 2, 5, 4, 0}
	keep := append([]float64(nil), cost...)
	Assignment(cost, 3, 2)
	Assignment(cost, 2, 3)
	if fmt.Sprint(cost) != fmt.Sprint(keep) {
		t.Errorf("cost changed to %v, was %v", cost, keep)
	}
}

func TestAssignmentPanics(t *testing.T) {
	tests := []struct {
		name string
		cost []float64
		r, c int
		want string
	}{
		{"NaN", []float64{1, math.NaN(), 2, 3}, 2, 2, "fit: assignment cost[0][1] is NaN"},
		{"Inf", []float64{1, 2, math.Inf(-1), 3}, 2, 2, "fit: assignment cost[1][0] is -Inf"},
		{"short", []float64{1, 2, 3}, 2, 2, "fit: assignment cost has 3 entries, want 2×2 = 4"},
		{"negative", nil, -1, 2, "fit: assignment of -1×2 matrix"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				got := fmt.Sprint(recover())
				if !strings.HasPrefix(got, tc.want) {
					t.Errorf("panic %q, want %q", got, tc.want)
				}
			}()
			Assignment(tc.cost, tc.r, tc.c)
		})
	}
}

func BenchmarkAssignment(b *testing.B) {
	for _, n := range []int{10, 100, 500} {
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(1, 2))
			cost := make([]float64, n*n)
			for i := range cost {
				cost[i] = rng.Float64()
			}
			for b.Loop() {
				Assignment(cost, n, n)
			}
		})
	}
}

func ExampleAssignment() {
	// Three workers (rows), two jobs (columns): one worker stays idle.
	cost := []float64{
		4, 1,
		2, 8,
		3, 3,
	}
	match, total := Assignment(cost, 3, 2)
	fmt.Println(match, total)
	// Output: [1 0 -1] 3
}
