package fit

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

// agreementReference is testdata/agreement_reference.json, written offline
// by testdata/reference/agreement.py with Debian's python3-sklearn 1.2.1
// (scipy 1.10.1, numpy 1.24.2); see that script for the settings.
type agreementReference struct {
	Sklearn   string `json:"sklearn"`
	Agreement []struct {
		Name            string
		A, B            []int32
		ARI, NMI        float64
		MatchedAccuracy float64 `json:"matched_accuracy"`
	}
	Silhouette []struct {
		Name            string
		Labels          []int32
		Sklearn, Direct float64
	}
	Assignment []struct {
		Name       string
		Rows, Cols int
		Cost       []float64
		Total      float64
	}
}

func loadAgreementReference(t testing.TB) agreementReference {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "agreement_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	var ref agreementReference
	if err := json.Unmarshal(raw, &ref); err != nil {
		t.Fatalf("agreement_reference.json: %v", err)
	}
	if ref.Sklearn != "1.2.1" {
		t.Fatalf("agreement_reference.json made with sklearn %q, want 1.2.1", ref.Sklearn)
	}
	return ref
}

// labelCodes returns 1 + the largest label, the number of codes a table needs.
func labelCodes(labels []int32) int {
	if len(labels) == 0 {
		return 0
	}
	return int(slices.Max(labels)) + 1
}

func agreementTable(a, b []int32) Contingency {
	return NewContingency(a, b, labelCodes(a), labelCodes(b))
}

func TestAgreementReference(t *testing.T) {
	// ARI, NMI and matched accuracy from sklearn.metrics
	// adjusted_rand_score and normalized_mutual_info_score (sklearn 1.2.1,
	// defaults: arithmetic-mean normalisation) and
	// scipy.optimize.linear_sum_assignment on the contingency table, via
	// testdata/reference/agreement.py. Tolerances allow for a different
	// summation order only.
	ref := loadAgreementReference(t)
	if len(ref.Agreement) == 0 {
		t.Fatal("no agreement cases in the reference file")
	}
	for _, tc := range ref.Agreement {
		t.Run(tc.Name, func(t *testing.T) {
			ct := agreementTable(tc.A, tc.B)
			if got := ct.AdjustedRand(); math.Abs(got-tc.ARI) > 1e-15 {
				t.Errorf("AdjustedRand = %.17g, sklearn %.17g", got, tc.ARI)
			}
			if got := ct.NormalizedMutualInfo(); math.Abs(got-tc.NMI) > 1e-14 {
				t.Errorf("NormalizedMutualInfo = %.17g, sklearn %.17g", got, tc.NMI)
			}
			if got, _ := ct.MatchedAccuracy(); got != tc.MatchedAccuracy {
				t.Errorf("MatchedAccuracy = %.17g, scipy %.17g", got, tc.MatchedAccuracy)
			}
		})
	}
}

func TestAdjustedRandHand(t *testing.T) {
	// a = 000111, b = 001122: cells 2,1,1,2 give I = 2 pairs together in
	// both, rows 3,3 give A = 6, columns 2,2,2 give B = 3, P = C(6,2) = 15:
	// ARI = (2 − 6·3/15) / ((6+3)/2 − 6·3/15) = 0.8/3.3 = 8/33.
	tests := []struct {
		name string
		a, b []int32
		want float64
	}{
		{"six rows", []int32{0, 0, 0, 1, 1, 1}, []int32{0, 0, 1, 1, 2, 2}, 8.0 / 33},
		{"renamed", []int32{0, 0, 1, 1, 2}, []int32{2, 2, 0, 0, 1}, 1},
		// I = 0, A = 2, B = 2, P = 6: (0 − 4/6)/(2 − 4/6) = −1/2.
		{"crossed", []int32{0, 0, 1, 1}, []int32{0, 1, 0, 1}, -0.5},
		// Denominator zero: identical partitions, defined as 1.
		{"both one group", []int32{0, 0, 0}, []int32{1, 1, 1}, 1},
		{"both all singletons", []int32{0, 1, 2, 3}, []int32{3, 2, 1, 0}, 1},
		{"one row", []int32{0}, []int32{0}, 1},
		{"no rows", nil, nil, 1},
		// One group against singletons: I = 0, A = P, B = 0: 0/(P/2) = 0.
		{"one group vs singletons", []int32{0, 0, 0, 0}, []int32{0, 1, 2, 3}, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := agreementTable(tc.a, tc.b).AdjustedRand(); got != tc.want {
				t.Errorf("AdjustedRand = %.17g, want %.17g", got, tc.want)
			}
		})
	}
}

// agreementRandomLabels returns n labels uniform in [0, k).
func agreementRandomLabels(rng *rand.Rand, n, k int) []int32 {
	l := make([]int32, n)
	for i := range l {
		l[i] = int32(rng.IntN(k))
	}
	return l
}

func TestAdjustedRandChance(t *testing.T) {
	// Independent labellings have expected ARI 0 (Hubert & Arabie 1985):
	// the mean over 50 seeds must be within ±0.01.
	tests := []struct {
		name      string
		n, ka, kb int
	}{
		{"500 rows 4 vs 5", 500, 4, 5},
		{"200 rows 2 vs 10", 200, 2, 10},
		{"1000 rows 8 vs 8", 1000, 8, 8},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var sum float64
			for seed := range uint64(50) {
				rng := rand.New(rand.NewPCG(seed, 11))
				a := agreementRandomLabels(rng, tc.n, tc.ka)
				b := agreementRandomLabels(rng, tc.n, tc.kb)
				sum += NewContingency(a, b, tc.ka, tc.kb).AdjustedRand()
			}
			if mean := sum / 50; math.Abs(mean) > 0.01 {
				t.Errorf("mean ARI of independent labellings = %.4f, want 0 ± 0.01", mean)
			}
		})
	}
}

func TestAgreementSymmetricAndRenaming(t *testing.T) {
	// ARI and NMI are symmetric in the two partitions and unchanged by
	// renaming groups (common practice; Hubert & Arabie 1985). ARI is exact
	// rational arithmetic, so swapping must give identical bits.
	for seed := range uint64(10) {
		t.Run(fmt.Sprintf("seed %d", seed), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(seed, 3))
			a := agreementRandomLabels(rng, 300, 5)
			b := make([]int32, len(a))
			for i := range b { // b agrees with a on about half the rows
				if rng.IntN(2) == 0 {
					b[i] = a[i]
				} else {
					b[i] = int32(rng.IntN(4))
				}
			}
			ab, ba := agreementTable(a, b), agreementTable(b, a)
			if x, y := ab.AdjustedRand(), ba.AdjustedRand(); x != y {
				t.Errorf("ARI(a,b) = %.17g, ARI(b,a) = %.17g", x, y)
			}
			if x, y := ab.NormalizedMutualInfo(), ba.NormalizedMutualInfo(); math.Abs(x-y) > 1e-15 {
				t.Errorf("NMI(a,b) = %.17g, NMI(b,a) = %.17g", x, y)
			}
			// Rename a's groups by a permutation: a against renamed a
			// agrees perfectly.
			perm := rng.Perm(5)
			ra := make([]int32, len(a))
			for i, l := range a {
				ra[i] = int32(perm[l])
			}
			same := agreementTable(a, ra)
			if got := same.AdjustedRand(); got != 1 {
				t.Errorf("ARI of a renamed copy = %.17g, want 1", got)
			}
			if got := same.NormalizedMutualInfo(); math.Abs(got-1) > 1e-15 {
				t.Errorf("NMI of a renamed copy = %.17g, want 1", got)
			}
			if acc, _ := same.MatchedAccuracy(); acc != 1 {
				t.Errorf("MatchedAccuracy of a renamed copy = %v, want 1", acc)
			}
			// Renaming one side leaves the scores against b unchanged.
			rb := agreementTable(ra, b)
			if x, y := ab.AdjustedRand(), rb.AdjustedRand(); x != y {
				t.Errorf("ARI changed under renaming: %.17g vs %.17g", x, y)
			}
			if x, y := ab.NormalizedMutualInfo(), rb.NormalizedMutualInfo(); math.Abs(x-y) > 1e-15 {
				t.Errorf("NMI changed under renaming: %.17g vs %.17g", x, y)
			}
		})
	}
}

func TestNormalizedMutualInfoRange(t *testing.T) {
	// NMI lies in [0, 1] for any pair of partitions, including very
	// unbalanced and very fine ones.
	for seed := range uint64(40) {
		rng := rand.New(rand.NewPCG(seed, 5))
		n := 1 + rng.IntN(60)
		a := agreementRandomLabels(rng, n, 1+rng.IntN(8))
		b := agreementRandomLabels(rng, n, 1+rng.IntN(n))
		got := agreementTable(a, b).NormalizedMutualInfo()
		if !(got >= 0 && got <= 1) {
			t.Errorf("seed %d: NMI = %v outside [0, 1]", seed, got)
		}
	}
}

func TestNormalizedMutualInfoDegenerate(t *testing.T) {
	// The limit cases as documented on NormalizedMutualInfo (and as
	// sklearn 1.2.1 defines them).
	tests := []struct {
		name string
		a, b []int32
		want float64
	}{
		{"both one group", []int32{0, 0, 0}, []int32{2, 2, 2}, 1},
		{"no rows", nil, nil, 1},
		{"one row", []int32{0}, []int32{0}, 1},
		{"one group vs three", []int32{0, 0, 0, 0, 0, 0}, []int32{0, 0, 1, 1, 2, 2}, 0},
		{"three vs one group", []int32{0, 0, 1, 1, 2, 2}, []int32{0, 0, 0, 0, 0, 0}, 0},
		// Independent by construction: every cell equal, MI = 0.
		{"balanced crossing", []int32{0, 0, 1, 1}, []int32{0, 1, 0, 1}, 0},
		// H(a) = H(b) = ln 2, MI = ln 2.
		{"identical halves", []int32{0, 0, 1, 1}, []int32{1, 1, 0, 0}, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := agreementTable(tc.a, tc.b).NormalizedMutualInfo(); math.Abs(got-tc.want) > 1e-15 {
				t.Errorf("NormalizedMutualInfo = %.17g, want %v", got, tc.want)
			}
		})
	}
}

func TestAgreementUnusedCodes(t *testing.T) {
	// Codes that no row uses add all-zero rows and columns to the table;
	// no measure may change.
	a := []int32{0, 0, 1, 2, 2, 2, 1, 0}
	b := []int32{1, 1, 0, 0, 2, 2, 0, 1}
	tight := NewContingency(a, b, 3, 3)
	loose := NewContingency(a, b, 6, 5)
	if x, y := tight.AdjustedRand(), loose.AdjustedRand(); x != y {
		t.Errorf("ARI %v with unused codes, %v without", y, x)
	}
	if x, y := tight.NormalizedMutualInfo(), loose.NormalizedMutualInfo(); x != y {
		t.Errorf("NMI %v with unused codes, %v without", y, x)
	}
	// Table rows a=0: (0,3,0), a=1: (2,0,0), a=2: (1,0,2); the best
	// matching 0→1, 1→0, 2→2 holds 3+2+2 of the 8 rows.
	if x, _ := tight.MatchedAccuracy(); x != 7.0/8 {
		t.Errorf("MatchedAccuracy = %v, want 7/8", x)
	}
	if y, _ := loose.MatchedAccuracy(); y != 7.0/8 {
		t.Errorf("MatchedAccuracy with unused codes = %v, want 7/8", y)
	}
}

func TestMatchedAccuracyHand(t *testing.T) {
	// Best matchings found by listing them all.
	tests := []struct {
		name       string
		rows, cols int
		n          []int64
		acc        float64
		match      []int
	}{
		// 3 clusters × 2 labels: 5+6 = 11 of 16 beats 4+6 = 10 and 1+4 = 5.
		{"more clusters", 3, 2, []int64{5, 1, 4, 0, 0, 6}, 11.0 / 16, []int{0, -1, 1}},
		// 2 clusters × 3 labels, two optimal matchings: (0→2, 1→0) = 10
		// and (0→0, 1→2) = 10 of 20; the others give 7, 8, 2 and 3.
		{"more labels, tie", 2, 3, []int64{2, 0, 7, 3, 0, 8}, 10.0 / 20, nil},
		{"diagonal", 2, 2, []int64{9, 1, 0, 10}, 19.0 / 20, []int{0, 1}},
		{"empty table", 2, 2, []int64{0, 0, 0, 0}, 0, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			ct := Contingency{Rows: tc.rows, Cols: tc.cols, N: tc.n}
			acc, match := ct.MatchedAccuracy()
			if acc != tc.acc {
				t.Errorf("accuracy = %v, want %v", acc, tc.acc)
			}
			if tc.match != nil && fmt.Sprint(match) != fmt.Sprint(tc.match) {
				t.Errorf("match = %v, want %v", match, tc.match)
			}
			if len(match) != tc.rows {
				t.Errorf("len(match) = %d, want %d", len(match), tc.rows)
			}
		})
	}
}

func TestNewContingency(t *testing.T) {
	ct := NewContingency([]int32{0, 1, 1, 2, 0}, []int32{1, 1, 1, 0, 1}, 3, 2)
	want := []int64{0, 2, 0, 2, 1, 0}
	if ct.Rows != 3 || ct.Cols != 2 || fmt.Sprint(ct.N) != fmt.Sprint(want) {
		t.Errorf("NewContingency = %+v, want 3×2 %v", ct, want)
	}
}

func TestContingencyPanics(t *testing.T) {
	tests := []struct {
		name string
		call func()
		want string
	}{
		{"lengths", func() { NewContingency([]int32{0}, nil, 1, 1) }, "fit: contingency of 1 and 0 labels"},
		{"code out of range", func() { NewContingency([]int32{0, 2}, []int32{0, 0}, 2, 1) }, "fit: contingency row 1: labels (2, 0) outside [0, 2)×[0, 1)"},
		{"negative code", func() { NewContingency([]int32{0}, []int32{-1}, 1, 1) }, "fit: contingency row 0: labels (0, -1)"},
		{"ragged table", func() { Contingency{Rows: 2, Cols: 2, N: []int64{1}}.AdjustedRand() }, "fit: contingency of 2×2 holds 1 counts"},
		{"negative count", func() { Contingency{Rows: 1, Cols: 2, N: []int64{1, -1}}.NormalizedMutualInfo() }, "fit: contingency count [0][1] is -1"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				got := fmt.Sprint(recover())
				if !strings.HasPrefix(got, tc.want) {
					t.Errorf("panic %q, want prefix %q", got, tc.want)
				}
			}()
			tc.call()
		})
	}
}

func BenchmarkContingency(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	x := agreementRandomLabels(rng, 1_000_000, 8)
	y := agreementRandomLabels(rng, 1_000_000, 10)
	b.Run("NewContingency 1e6", func(b *testing.B) {
		for b.Loop() {
			NewContingency(x, y, 8, 10)
		}
	})
	ct := NewContingency(x, y, 8, 10)
	b.Run("scores 8x10", func(b *testing.B) {
		for b.Loop() {
			ct.AdjustedRand()
			ct.NormalizedMutualInfo()
			ct.MatchedAccuracy()
		}
	})
}

func ExampleContingency() {
	// Cluster numbers from a fit against known classes: the clusters are
	// the classes renamed, except that row 5 went to the wrong cluster.
	clusters := []int32{1, 1, 0, 0, 2, 0}
	classes := []int32{0, 0, 1, 1, 2, 2}
	t := NewContingency(clusters, classes, 3, 3)
	acc, match := t.MatchedAccuracy()
	fmt.Printf("accuracy %.3f, cluster→class %v\n", acc, match)
	fmt.Printf("ARI %.4f, NMI %.4f\n", t.AdjustedRand(), t.NormalizedMutualInfo())
	// Output:
	// accuracy 0.833, cluster→class [1 0 2]
	// ARI 0.4444, NMI 0.7397
}
