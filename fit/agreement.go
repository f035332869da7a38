package fit

import (
	"fmt"
	"math"
	"math/big"
)

// Contingency is a clusters × labels table of counts: N[i*Cols+j] is the
// number of rows put in cluster i by one partition and given label j by the
// other. Rows or columns that are all zero (unused codes) are allowed and
// change none of the agreement measures.
type Contingency struct {
	Rows, Cols int
	N          []int64 // Rows×Cols, row-major
}

// maxContingencyTotal bounds the grand total n so that n(n−1), and so every
// pair count C(x, 2) = x(x−1)/2 with x ≤ n, fits in an int64 (n < 2³¹); a
// table that large is far beyond what int32 label slices in memory give.
const maxContingencyTotal = 1 << 31

// NewContingency cross-tabulates two labellings of the same rows: a[i] in
// [0, ra) and b[i] in [0, cb). Unequal lengths or a code out of range is
// programmer misuse and panics.
func NewContingency(a, b []int32, ra, cb int) Contingency {
	if len(a) != len(b) {
		panic(fmt.Sprintf("fit: contingency of %d and %d labels", len(a), len(b)))
	}
	if ra < 0 || cb < 0 {
		panic(fmt.Sprintf("fit: contingency of %d×%d codes", ra, cb))
	}
	t := Contingency{Rows: ra, Cols: cb, N: make([]int64, ra*cb)}
	for i := range a {
		x, y := a[i], b[i]
		if x < 0 || int(x) >= ra || y < 0 || int(y) >= cb {
			panic(fmt.Sprintf("fit: contingency row %d: labels (%d, %d) outside [0, %d)×[0, %d)", i, x, y, ra, cb))
		}
		t.N[int(x)*cb+int(y)]++
	}
	return t
}

// margins checks the table's shape and returns its row sums, column sums and
// grand total. Misuse (wrong length, negative counts, a total of 2³¹ or
// more) panics.
func (t Contingency) margins() (rowSum, colSum []int64, n int64) {
	if t.Rows < 0 || t.Cols < 0 || len(t.N) != t.Rows*t.Cols {
		panic(fmt.Sprintf("fit: contingency of %d×%d holds %d counts", t.Rows, t.Cols, len(t.N)))
	}
	rowSum = make([]int64, t.Rows)
	colSum = make([]int64, t.Cols)
	for i := range t.Rows {
		for j, v := range t.N[i*t.Cols : (i+1)*t.Cols] {
			if v < 0 {
				panic(fmt.Sprintf("fit: contingency count [%d][%d] is %d", i, j, v))
			}
			rowSum[i] += v
			colSum[j] += v
			n += v
			if n >= maxContingencyTotal {
				panic(fmt.Sprintf("fit: contingency total exceeds %d", int64(maxContingencyTotal)))
			}
		}
	}
	return rowSum, colSum, n
}

// MatchedAccuracy matches rows (clusters) to columns (labels) one-to-one so
// that the matched cells hold as many rows as possible, and returns
//
//	acc = Σ_i N_{i,σ(i)} / n
//
// with n the grand total, together with the matching σ (match[i] is the
// column of row i, or -1 when there are more rows than columns). The
// matching is found by the Hungarian method (Assignment) on the negated
// counts; rectangular tables are allowed, so surplus clusters or labels go
// unmatched and their rows count as errors. An empty table (n = 0) has
// accuracy 0.
func (t Contingency) MatchedAccuracy() (acc float64, match []int) {
	_, _, n := t.margins()
	cost := make([]float64, len(t.N))
	for i, v := range t.N {
		cost[i] = -float64(v)
	}
	match, _ = Assignment(cost, t.Rows, t.Cols)
	if n == 0 {
		return 0, match
	}
	var hit int64
	for i, j := range match {
		if j >= 0 {
			hit += t.N[i*t.Cols+j]
		}
	}
	return float64(hit) / float64(n), match
}

// AdjustedRand is the adjusted Rand index of Hubert & Arabie (1985, Journal
// of Classification 2, 193–218): with n_ij the cell counts, a_i the row sums,
// b_j the column sums and C(x,2) = x(x−1)/2,
//
//	I = Σ_ij C(n_ij,2),  A = Σ_i C(a_i,2),  B = Σ_j C(b_j,2),  P = C(n,2),
//	ARI = (I − A·B/P) / (½(A + B) − A·B/P).
//
// It is 1 for identical partitions (up to renaming), has expectation 0 under
// random labellings with the observed margins, is symmetric, and may be
// negative. It is evaluated exactly in rational arithmetic, written over
// the pair counts as 2(I·D − (A−I)(B−I)) / (A(P−B) + B(P−A)) with
// D = P − A − B + I the pairs apart in both partitions, and rounded once to
// float64, so swapping the partitions gives the identical value.
//
// The denominator is zero only when A = B ∈ {0, P}: both partitions put
// every row alone, or both put all rows together (this includes n < 2).
// Those partitions are identical, and AdjustedRand returns 1, as common
// practice does.
func (t Contingency) AdjustedRand() float64 {
	rowSum, colSum, n := t.margins()
	pairs := func(x int64) int64 { return x * (x - 1) / 2 }
	var I, A, B int64
	for _, v := range t.N {
		I += pairs(v)
	}
	for _, v := range rowSum {
		A += pairs(v)
	}
	for _, v := range colSum {
		B += pairs(v)
	}
	P := pairs(n)
	bi := func(x int64) *big.Int { return big.NewInt(x) }
	mul := func(x, y *big.Int) *big.Int { return new(big.Int).Mul(x, y) }
	// Numerator 2(I·D − (A−I)(B−I)), denominator A(P−B) + B(P−A).
	D := P - A - B + I
	num := new(big.Int).Sub(mul(bi(I), bi(D)), mul(bi(A-I), bi(B-I)))
	num.Lsh(num, 1)
	den := new(big.Int).Add(mul(bi(A), bi(P-B)), mul(bi(B), bi(P-A)))
	if den.Sign() == 0 {
		return 1
	}
	ari, _ := new(big.Rat).SetFrac(num, den).Float64()
	return ari
}

// NormalizedMutualInfo is the mutual information of the two partitions
// divided by the arithmetic mean of their entropies (the normalisation
// common practice uses by default; Strehl & Ghosh 2002 used the geometric
// mean instead):
//
//	MI   = Σ_ij (n_ij/n) ln( n·n_ij / (a_i·b_j) ),
//	H(a) = −Σ_i (a_i/n) ln(a_i/n),  H(b) likewise,
//	NMI  = MI / ((H(a) + H(b)) / 2),
//
// with n_ij the cell counts, a_i the row sums, b_j the column sums and n the
// total; empty cells, rows and columns contribute nothing. Natural logs are
// used, but the ratio does not depend on the base.
//
// Degenerate cases: when both partitions have at most one non-empty group
// (both entropies zero, including an empty table) they are identical and
// NMI is 1; when only one of them has a single group, MI is 0 and so is NMI.
// Rounding is clamped so that the result is always in [0, 1].
func (t Contingency) NormalizedMutualInfo() float64 {
	rowSum, colSum, n := t.margins()
	usedRows, usedCols := 0, 0
	for _, v := range rowSum {
		if v > 0 {
			usedRows++
		}
	}
	for _, v := range colSum {
		if v > 0 {
			usedCols++
		}
	}
	if usedRows <= 1 && usedCols <= 1 {
		return 1
	}
	if usedRows <= 1 || usedCols <= 1 {
		return 0
	}
	fn := float64(n)
	var mi float64
	for i := range t.Rows {
		for j, v := range t.N[i*t.Cols : (i+1)*t.Cols] {
			if v == 0 {
				continue
			}
			p := float64(v) / fn
			// ln(n·n_ij/(a_i·b_j)) as a product of two ratios keeps every
			// factor near 1 in magnitude and exact integers below 2⁵³.
			mi += p * math.Log((float64(v)/float64(rowSum[i]))*(fn/float64(colSum[j])))
		}
	}
	if mi <= 0 {
		return 0
	}
	h := (marginEntropy(rowSum, fn) + marginEntropy(colSum, fn)) / 2
	return min(mi/h, 1)
}

// marginEntropy is −Σ (s/n) ln(s/n) over the non-zero sums s.
func marginEntropy(sums []int64, n float64) float64 {
	var h float64
	for _, s := range sums {
		if s > 0 {
			p := float64(s) / n
			h -= p * math.Log(p)
		}
	}
	return h
}
