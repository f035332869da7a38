package fit

import (
	"cmp"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// Reservoir keeps a uniform random sample of at most Cap rows of d
// features (and their 0-based row numbers) from a stream; seeded; the same
// stream and seed give the same sample.
//
// It is Li's Algorithm L (K.-H. Li 1994, "Reservoir-sampling algorithms of
// time complexity O(n(1 + log(N/n)))", ACM Trans. Math. Softw. 20(4),
// 481–493), which after the first Cap rows draws the number of rows to
// skip before the next one enters instead of drawing once per row. With
// c = Cap and U uniform on (0, 1):
//
//  1. the first c rows fill the reservoir; then W ← exp(ln U / c);
//  2. repeat: skip ⌊ln U / ln(1 − W)⌋ rows; the next row replaces a slot
//     drawn uniformly from the c; W ← W·exp(ln U / c).
//
// After N ≥ c rows every c-subset of them is the sample with the same
// probability. The draws depend only on positions in the stream, never on
// how Add calls split it, so the sample does not depend on the chunking.
// Randomness comes from a PCG generator (math/rand/v2) seeded with
// (seed, 0x5EED). Memory: Cap·(8d + 8) bytes.
type Reservoir struct {
	capRows, d int
	rng        *rand.Rand
	seen       int64     // rows added so far
	x          []float64 // sampled rows, slot order, row-major
	row        []int64   // their row numbers
	w          float64   // Algorithm L's W
	next       int64     // row number of the next row to enter (once full)
}

// NewReservoir returns an empty Reservoir for at most capRows rows of d
// features. It panics unless capRows ≥ 1 and d ≥ 1.
func NewReservoir(capRows, d int, seed uint64) *Reservoir {
	if capRows < 1 || d < 1 {
		panic(fmt.Sprintf("fit: reservoir of %d rows of %d features", capRows, d))
	}
	return &Reservoir{
		capRows: capRows, d: d,
		rng: rand.New(rand.NewPCG(seed, 0x5EED)),
		x:   make([]float64, 0, capRows*d),
		row: make([]int64, 0, capRows),
	}
}

// Add offers the rows of rows (row-major, d features each) to the
// reservoir, numbered on from Seen(). rows is not retained. It panics if
// len(rows) is not a multiple of d.
func (r *Reservoir) Add(rows []float64) {
	d := r.d
	if len(rows)%d != 0 {
		panic(fmt.Sprintf("fit: %d values do not make rows of %d features", len(rows), d))
	}
	m := int64(len(rows) / d)
	i := int64(0) // next row of rows to look at
	for i < m && len(r.row) < r.capRows {
		r.x = append(r.x, rows[i*int64(d):(i+1)*int64(d)]...)
		r.row = append(r.row, r.seen)
		r.seen++
		i++
		if len(r.row) == r.capRows {
			r.w = math.Exp(math.Log(r.open01()) / float64(r.capRows))
			r.next = r.seen + r.skip()
		}
	}
	if i == m {
		return
	}
	end := r.seen + (m - i) // row number after rows
	for r.next < end {
		j := i + (r.next - r.seen)
		slot := r.rng.IntN(r.capRows)
		copy(r.x[slot*d:(slot+1)*d], rows[j*int64(d):(j+1)*int64(d)])
		r.row[slot] = r.next
		r.w *= math.Exp(math.Log(r.open01()) / float64(r.capRows))
		i = j + 1
		r.seen = r.next + 1
		r.next = r.seen + r.skip()
	}
	r.seen = end
}

// skip draws Algorithm L's gap ⌊ln U / ln(1 − W)⌋, capped far beyond any
// stream length.
func (r *Reservoir) skip() int64 {
	const most = 1 << 62
	s := math.Floor(math.Log(r.open01()) / math.Log1p(-r.w))
	if !(s < most) { // also NaN
		return most
	}
	return int64(s)
}

// open01 draws U uniform on (0, 1).
func (r *Reservoir) open01() float64 {
	for {
		if u := r.rng.Float64(); u > 0 {
			return u
		}
	}
}

// Seen returns the number of rows added so far.
func (r *Reservoir) Seen() int64 { return r.seen }

// Sample returns a copy of the sampled rows, min(Cap, Seen()) of them,
// ordered by row number (the order they had in the stream).
func (r *Reservoir) Sample() *Dense {
	d := r.d
	x := make([]float64, 0, len(r.x))
	for _, s := range r.slots() {
		x = append(x, r.x[s*d:(s+1)*d]...)
	}
	return &Dense{N: len(r.row), D: d, X: x}
}

// RowNumbers returns the 0-based row numbers of the sampled rows, in
// Sample's order (ascending).
func (r *Reservoir) RowNumbers() []int64 {
	out := slices.Clone(r.row)
	slices.Sort(out)
	return out
}

// slots returns the reservoir's slots ordered by their row numbers.
func (r *Reservoir) slots() []int {
	s := make([]int, len(r.row))
	for i := range s {
		s[i] = i
	}
	slices.SortFunc(s, func(a, b int) int { return cmp.Compare(r.row[a], r.row[b]) })
	return s
}
