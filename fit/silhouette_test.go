package fit

import (
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// silhouetteReadCSV reads testdata/<name>: a header line, then an id column
// followed by numeric features. It returns the features row-major.
func silhouetteReadCSV(t testing.TB, name string) (x []float64, d int) {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	d = len(recs[0]) - 1
	for i, rec := range recs[1:] {
		for j, s := range rec[1:] {
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				t.Fatalf("%s: line %d column %d: %v", name, i+2, j+2, err)
			}
			x = append(x, v)
		}
	}
	return x, d
}

func TestSilhouetteReference(t *testing.T) {
	// sklearn.metrics.silhouette_score(X, labels, metric="euclidean") with
	// every row (sklearn 1.2.1), and the same value from a direct numpy
	// evaluation of the definition, both recorded by
	// testdata/reference/agreement.py. Data: Fisher's Iris with the species
	// as clusters and with a cut on petal length; Old Faithful split at an
	// eruption time of 3 minutes (sources in testdata/SOURCES.md).
	ref := loadAgreementReference(t)
	files := map[string]string{
		"iris species":                   "iris.csv",
		"iris petal length cut":          "iris.csv",
		"faithful eruptions above 3 min": "faithful.csv",
	}
	if len(ref.Silhouette) != len(files) {
		t.Fatalf("reference has %d silhouette cases, want %d", len(ref.Silhouette), len(files))
	}
	for _, tc := range ref.Silhouette {
		t.Run(tc.Name, func(t *testing.T) {
			x, d := silhouetteReadCSV(t, files[tc.Name])
			src := NewDense(x, d)
			if src.Len() != len(tc.Labels) {
				t.Fatalf("%d rows, %d labels", src.Len(), len(tc.Labels))
			}
			// sampleSize ≥ n: every row, the exact value.
			got, err := Silhouette(context.Background(), src, tc.Labels, labelCodes(tc.Labels), src.Len(), 1, 2)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(got-tc.Sklearn) > 1e-12 {
				t.Errorf("Silhouette = %.17g, sklearn %.17g", got, tc.Sklearn)
			}
			if math.Abs(got-tc.Direct) > 1e-12 {
				t.Errorf("Silhouette = %.17g, direct numpy %.17g", got, tc.Direct)
			}
		})
	}
}

func TestSilhouetteHand(t *testing.T) {
	// Points on a line, widths worked out by hand from Rousseeuw's
	// definition. Clusters {0, 1} and {4, 6}:
	//   0: a = 1, b = (4+6)/2 = 5,   s = 4/5
	//   1: a = 1, b = (3+5)/2 = 4,   s = 3/4
	//   4: a = 2, b = (4+3)/2 = 3.5, s = 1.5/3.5 = 3/7
	//   6: a = 2, b = (6+5)/2 = 5.5, s = 3.5/5.5 = 7/11
	// Adding 20 alone in a third cluster gives it s = 0 and leaves every
	// other b unchanged (its distances 20, 19, 16, 14 are all larger).
	four := (0.8 + 0.75 + 3.0/7 + 7.0/11) / 4
	tests := []struct {
		name   string
		x      []float64
		labels []int32
		k      int
		want   float64
	}{
		{"two pairs", []float64{0, 1, 4, 6}, []int32{0, 0, 1, 1}, 2, four},
		{"two pairs, relabelled and shuffled", []float64{6, 0, 4, 1}, []int32{0, 1, 0, 1}, 2, four},
		{"with a singleton", []float64{0, 1, 4, 6, 20}, []int32{0, 0, 1, 1, 2}, 3, four * 4 / 5},
		{"k = 1", []float64{0, 1, 4, 6}, []int32{0, 0, 0, 0}, 1, 0},
		{"one cluster used of three", []float64{0, 1, 4, 6}, []int32{2, 2, 2, 2}, 3, 0},
		{"all points equal", []float64{3, 3, 3, 3}, []int32{0, 1, 0, 1}, 2, 0},
		{"one row", []float64{3}, []int32{1}, 2, 0},
		// Two rows, two clusters: both alone in their cluster, s = 0.
		{"two singletons", []float64{0, 5}, []int32{0, 1}, 2, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := Silhouette(context.Background(), NewDense(tc.x, 1), tc.labels, tc.k, 0, 1, 1)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(got-tc.want) > 1e-15 {
				t.Errorf("Silhouette = %.17g, want %.17g", got, tc.want)
			}
		})
	}
}

// silhouetteBlobs returns n rows of d features around k centres, and the
// centre each row was drawn around.
func silhouetteBlobs(n, d, k int, seed uint64) ([]float64, []int32) {
	rng := rand.New(rand.NewPCG(seed, 99))
	centres := make([]float64, k*d)
	for i := range centres {
		centres[i] = rng.Float64() * 10
	}
	x := make([]float64, n*d)
	labels := make([]int32, n)
	for i := range n {
		c := rng.IntN(k)
		labels[i] = int32(c)
		for f := range d {
			x[i*d+f] = centres[c*d+f] + rng.NormFloat64()
		}
	}
	return x, labels
}

func TestSilhouetteDeterministic(t *testing.T) {
	// The same bits for any worker count and any chunking of the source.
	x, labels := silhouetteBlobs(3000, 3, 4, 1)
	for _, sample := range []int{0, 500, 3000} {
		t.Run(fmt.Sprintf("sample %d", sample), func(t *testing.T) {
			var first float64
			for i, cfg := range []struct{ workers, chunk int }{{1, 0}, {2, 0}, {8, 0}, {3, 7}, {2, 1000}, {5, 1}} {
				src := NewDense(x, 3)
				src.ChunkRows = cfg.chunk
				got, err := Silhouette(context.Background(), src, labels, 4, sample, 42, cfg.workers)
				if err != nil {
					t.Fatal(err)
				}
				if i == 0 {
					first = got
				} else if got != first {
					t.Errorf("workers %d, chunk rows %d: %.17g, want %.17g", cfg.workers, cfg.chunk, got, first)
				}
			}
			if !(first > 0.3 && first <= 1) { // well separated blobs
				t.Errorf("Silhouette = %v, want a clearly positive width", first)
			}
		})
	}
}

func TestSilhouetteSample(t *testing.T) {
	// A sampled estimate is the exact silhouette of the sampled rows alone
	// (bit for bit: same rows, same order), it is reproducible for a seed,
	// and different seeds draw different rows.
	x, labels := silhouetteBlobs(2000, 2, 3, 2)
	const m = 300
	for _, seed := range []uint64{1, 2, 3} {
		t.Run(fmt.Sprintf("seed %d", seed), func(t *testing.T) {
			got, err := Silhouette(context.Background(), NewDense(x, 2), labels, 3, m, seed, 2)
			if err != nil {
				t.Fatal(err)
			}
			rows := silhouetteSampleRows(2000, m, seed)
			sx := make([]float64, 0, 2*m)
			sl := make([]int32, 0, m)
			for _, r := range rows {
				sx = append(sx, x[2*r:2*r+2]...)
				sl = append(sl, labels[r])
			}
			exact, err := Silhouette(context.Background(), NewDense(sx, 2), sl, 3, m, 0, 1)
			if err != nil {
				t.Fatal(err)
			}
			if got != exact {
				t.Errorf("sampled estimate %.17g, silhouette of the sample %.17g", got, exact)
			}
			again, _ := Silhouette(context.Background(), NewDense(x, 2), labels, 3, m, seed, 1)
			if again != got {
				t.Errorf("second run %.17g, first %.17g", again, got)
			}
			if other := silhouetteSampleRows(2000, m, seed+100); slices.Equal(other, rows) {
				t.Errorf("seeds %d and %d drew the same rows", seed, seed+100)
			}
		})
	}
}

func TestSilhouetteSampleRows(t *testing.T) {
	// Floyd's algorithm draws every m-subset with equal probability, so
	// each row is drawn with probability m/n. Over 20000 draws of 3 rows of
	// 10 each count is Binomial(20000, 0.3): mean 6000, sd 64.8; allow 5 sd.
	const n, m, draws = 10, 3, 20000
	count := make([]int, n)
	for s := range uint64(draws) {
		rows := silhouetteSampleRows(n, m, s)
		if len(rows) != m {
			t.Fatalf("seed %d: %d rows, want %d", s, len(rows), m)
		}
		for i := 1; i < m; i++ {
			if rows[i] <= rows[i-1] {
				t.Fatalf("seed %d: rows %v are not strictly increasing", s, rows)
			}
		}
		for _, r := range rows {
			if r < 0 || r >= n {
				t.Fatalf("seed %d: row %d outside [0, %d)", s, r, n)
			}
			count[r]++
		}
	}
	for r, c := range count {
		if math.Abs(float64(c)-6000) > 5*64.8 {
			t.Errorf("row %d drawn %d times, want 6000 ± 324", r, c)
		}
	}
	if all := silhouetteSampleRows(5, 5, 9); !slices.Equal(all, []int{0, 1, 2, 3, 4}) {
		t.Errorf("m = n gave %v, want every row", all)
	}
}

// failingSource fails on one chunk.
type failingSource struct {
	*Dense
	bad int
}

func (s failingSource) Chunk(c int, buf []float64) ([]float64, int, error) {
	if c == s.bad {
		return nil, 0, fmt.Errorf("read chunk %d: connection reset", c)
	}
	return s.Dense.Chunk(c, buf)
}

func TestSilhouetteErrors(t *testing.T) {
	x, labels := silhouetteBlobs(100, 2, 2, 3)
	cancelled, cancel := context.WithCancel(context.Background())
	cancel()
	withNaN := slices.Clone(x)
	withNaN[17] = math.NaN()
	chunked := NewDense(x, 2)
	chunked.ChunkRows = 10
	tests := []struct {
		name string
		ctx  context.Context
		src  Source
		want string
		is   error
	}{
		{"cancelled", cancelled, NewDense(x, 2), "silhouette: collect 100 sampled rows: context canceled", context.Canceled},
		{"source error", context.Background(), failingSource{chunked, 3}, "silhouette: collect 100 sampled rows: read chunk 3: connection reset", nil},
		{"NaN feature", context.Background(), NewDense(withNaN, 2), "silhouette: width is NaN; the sampled rows hold NaN or infinite features", nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := Silhouette(tc.ctx, tc.src, labels, 2, 0, 1, 2)
			if err == nil {
				t.Fatalf("Silhouette = %v, want error %q", got, tc.want)
			}
			if err.Error() != tc.want {
				t.Errorf("error %q, want %q", err, tc.want)
			}
			if tc.is != nil && !errors.Is(err, tc.is) {
				t.Errorf("error %v does not wrap %v", err, tc.is)
			}
		})
	}
}

func TestSilhouettePanics(t *testing.T) {
	src := NewDense([]float64{0, 1, 2, 3}, 1)
	tests := []struct {
		name   string
		labels []int32
		k      int
		sample int
		want   string
	}{
		{"label too large", []int32{0, 1, 2, 0}, 2, 0, "fit: silhouette: label 2 of row 2 outside [0, 2)"},
		{"negative label", []int32{0, -1, 1, 0}, 2, 0, "fit: silhouette: label -1 of row 1 outside [0, 2)"},
		{"labels short", []int32{0, 1}, 2, 0, "fit: silhouette of 4 rows with 2 labels"},
		{"k zero", []int32{0, 0, 0, 0}, 0, 0, "fit: silhouette with k=0, sample size 0"},
		{"negative sample", []int32{0, 0, 0, 0}, 1, -5, "fit: silhouette with k=1, sample size -5"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if got := fmt.Sprint(recover()); !strings.HasPrefix(got, tc.want) {
					t.Errorf("panic %q, want %q", got, tc.want)
				}
			}()
			Silhouette(context.Background(), src, tc.labels, tc.k, tc.sample, 1, 1)
		})
	}
}

func BenchmarkSilhouette(b *testing.B) {
	// One pass over 10⁶ rows of 8 features to collect the sample, then m²
	// distances among the sampled rows.
	const n, d, k = 1_000_000, 8, 8
	x, labels := silhouetteBlobs(n, d, k, 4)
	src := NewDense(x, d)
	for _, m := range []int{2000, 10000} {
		for _, workers := range []int{1, 2} {
			b.Run(fmt.Sprintf("n=1e6 d=8 k=8 sample=%d workers=%d", m, workers), func(b *testing.B) {
				for b.Loop() {
					if _, err := Silhouette(context.Background(), src, labels, k, m, 1, workers); err != nil {
						b.Fatal(err)
					}
				}
				b.ReportMetric(float64(m)*float64(m)*float64(b.N)/b.Elapsed().Seconds(), "distances/s")
			})
		}
	}
}
