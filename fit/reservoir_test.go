package fit

import (
	"context"
	"fmt"
	"math"
	"reflect"
	"slices"
	"testing"
)

// kmStream returns n rows of d features where row i is (i, i + 0.5, ...),
// so a row's values name it.
func kmStream(n, d int) []float64 {
	x := make([]float64, n*d)
	for i := range n {
		for f := range d {
			x[i*d+f] = float64(i) + float64(f)/2
		}
	}
	return x
}

// kmFill adds x to r in chunks of the given number of rows.
func kmFill(r *Reservoir, x []float64, d, chunk int) {
	for lo := 0; lo < len(x); lo += chunk * d {
		r.Add(x[lo:min(lo+chunk*d, len(x))])
	}
}

// TestReservoirUniform: every row of a stream of n = 1000 must be in a
// sample of 100 with probability 1/10. Over 2000 seeds each row's
// inclusion count has expectation E = 200; the chi-square statistic
// Σ (O − E)²/E over the 1000 rows is compared with the 0.999 quantile of
// chi-square with 999 degrees of freedom by the Wilson–Hilferty
// approximation (E. B. Wilson and M. M. Hilferty 1931, "The distribution
// of chi-square", PNAS 17(12), 684–688): ν(1 − 2/(9ν) + z√(2/(9ν)))³ with
// z = 3.0902, the standard normal 0.999 quantile (common practice), about
// 1143. (The inclusion counts sum to 2000·100 and each is binomial with
// variance 2000·0.1·0.9, so the statistic's mean is about 0.9·999; the
// test is conservative.) A sampler that favours early or late rows fails
// by far: keeping the first 100 rows gives 2000·900 + 200·900 = 1.98·10⁶.
func TestReservoirUniform(t *testing.T) {
	const n, capRows, seeds = 1000, 100, 2000
	x := kmStream(n, 2)
	counts := make([]float64, n)
	for s := range uint64(seeds) {
		r := NewReservoir(capRows, 2, s)
		kmFill(r, x, 2, 37)
		rows := r.RowNumbers()
		if len(rows) != capRows {
			t.Fatalf("seed %d: %d rows sampled, want %d", s, len(rows), capRows)
		}
		for i, row := range rows {
			if i > 0 && row <= rows[i-1] {
				t.Fatalf("seed %d: row numbers %v not increasing", s, rows)
			}
			counts[row]++
		}
	}
	const e = float64(seeds) * capRows / n
	var chi2 float64
	for _, o := range counts {
		chi2 += (o - e) * (o - e) / e
	}
	nu := float64(n - 1)
	h := 2 / (9 * nu)
	crit := nu * math.Pow(1-h+3.0902*math.Sqrt(h), 3)
	t.Logf("chi-square %.1f, 0.999 quantile %.1f", chi2, crit)
	if math.Abs(crit-1142.8) > 0.5 {
		t.Fatalf("critical value %.2f, want about 1142.8", crit)
	}
	if chi2 > crit {
		t.Errorf("chi-square %.1f above the 0.999 quantile %.1f of 999 degrees of freedom", chi2, crit)
	}
	// Early and late rows alike: the first and last tenth of the stream
	// each hold a tenth of the inclusions, within 3%.
	var early, late float64
	for i := range n / 10 {
		early += counts[i]
		late += counts[n-1-i]
	}
	if want := float64(seeds * capRows / 10); math.Abs(early-want) > 0.03*want || math.Abs(late-want) > 0.03*want {
		t.Errorf("first tenth %v, last tenth %v inclusions; want %v each", early, late, want)
	}
}

// TestReservoirChunking: the sample depends on the stream and the seed
// only, not on how Add splits the stream.
func TestReservoirChunking(t *testing.T) {
	const n, d = 5000, 3
	x := kmStream(n, d)
	tests := []struct {
		name    string
		capRows int
		seed    uint64
	}{
		{"cap 100", 100, 7},
		{"cap 1", 1, 8},
		{"cap 999", 999, 9},
		{"cap beyond the stream", 6000, 10},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var ref *Dense
			var refRows []int64
			for _, chunk := range []int{1, 7, 1000, n} {
				r := NewReservoir(tt.capRows, d, tt.seed)
				kmFill(r, x, d, chunk)
				if r.Seen() != n {
					t.Fatalf("chunks of %d: Seen = %d, want %d", chunk, r.Seen(), n)
				}
				s, rows := r.Sample(), r.RowNumbers()
				if s.N != min(tt.capRows, n) || s.D != d || len(rows) != s.N {
					t.Fatalf("chunks of %d: %d×%d sample, %d row numbers", chunk, s.N, s.D, len(rows))
				}
				// Each sampled row is the stream's row of that number.
				for i, row := range rows {
					if !slices.Equal(s.Row(i), x[int(row)*d:int(row+1)*d]) {
						t.Fatalf("chunks of %d: sample row %d = %v, stream row %d = %v", chunk, i, s.Row(i), row, x[int(row)*d:int(row+1)*d])
					}
				}
				if ref == nil {
					ref, refRows = s, rows
					continue
				}
				if !reflect.DeepEqual(s, ref) || !slices.Equal(rows, refRows) {
					t.Errorf("chunks of %d give another sample than chunks of 1", chunk)
				}
			}
		})
	}
}

func TestReservoirCases(t *testing.T) {
	x := kmStream(50, 2)
	tests := []struct {
		name    string
		capRows int
		n       int // rows of x added
		seed    uint64
		rows    []int64 // expected row numbers; nil: only checked for shape
	}{
		{"empty stream", 5, 0, 1, []int64{}},
		{"fewer rows than the cap", 10, 4, 1, []int64{0, 1, 2, 3}},
		{"exactly the cap", 4, 4, 1, []int64{0, 1, 2, 3}},
		{"cap 1", 1, 50, 3, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := NewReservoir(tt.capRows, 2, tt.seed)
			r.Add(x[:tt.n*2])
			rows := r.RowNumbers()
			if r.Seen() != int64(tt.n) || len(rows) != min(tt.capRows, tt.n) {
				t.Fatalf("Seen %d, %d rows; want %d, %d", r.Seen(), len(rows), tt.n, min(tt.capRows, tt.n))
			}
			if tt.rows != nil && !slices.Equal(rows, tt.rows) {
				t.Errorf("rows %v, want %v", rows, tt.rows)
			}
			// Same seed, same sample; the sample is a copy.
			again := NewReservoir(tt.capRows, 2, tt.seed)
			again.Add(x[:tt.n*2])
			s := r.Sample()
			if !reflect.DeepEqual(s, again.Sample()) {
				t.Errorf("same seed, different sample")
			}
			if len(s.X) > 0 {
				s.X[0] = -1
				if r.Sample().X[0] == -1 {
					t.Errorf("Sample shares its storage with the reservoir")
				}
			}
		})
	}
	// Different seeds give different samples of a long stream.
	a, b := NewReservoir(10, 2, 1), NewReservoir(10, 2, 2)
	a.Add(x)
	b.Add(x)
	if slices.Equal(a.RowNumbers(), b.RowNumbers()) {
		t.Errorf("seeds 1 and 2 both sampled rows %v", a.RowNumbers())
	}
}

func TestReservoirPanics(t *testing.T) {
	tests := []struct {
		name string
		f    func()
	}{
		{"zero capacity", func() { NewReservoir(0, 2, 1) }},
		{"no features", func() { NewReservoir(5, 0, 1) }},
		{"ragged rows", func() { NewReservoir(5, 2, 1).Add([]float64{1, 2, 3}) }},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Error("no panic")
				}
			}()
			tt.f()
		})
	}
}

// BenchmarkReservoir streams 10⁷ rows of 8 features in chunks of 4096
// into a reservoir of 10⁵ rows.
func BenchmarkReservoir(b *testing.B) {
	const n, d, chunk = 10_000_000, 8, 4096
	x := kmStream(chunk, d)
	b.SetBytes(n * d * 8)
	for b.Loop() {
		r := NewReservoir(100_000, d, 1)
		for range n / chunk {
			r.Add(x)
		}
	}
}

// ExampleReservoir samples a stream read in chunks, fits on the sample and
// scores every row: the sample-then-score plan for tables too large to
// iterate over.
func ExampleReservoir() {
	// An invented stream of 100 000 rows of two features in two groups,
	// around (0, 0) and (100, 100), arriving in chunks of 4096 rows.
	const n, d = 100_000, 2
	row := func(i int) []float64 {
		g := float64(100 * (i % 2))
		return []float64{g + float64(i%7) - 3, g + float64(i%5) - 2}
	}
	r := NewReservoir(2000, d, 42)
	chunk := make([]float64, 0, 4096*d)
	for i := range n {
		chunk = append(chunk, row(i)...)
		if len(chunk) == cap(chunk) || i == n-1 {
			r.Add(chunk)
			chunk = chunk[:0]
		}
	}
	sample := r.Sample()
	res, err := KMeans(context.Background(), sample, KMeansConfig{K: 2, Seed: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	// Score the whole stream with the fitted centres.
	var sizes [2]int
	for i := range n {
		l, _ := Nearest(res.Centers, d, row(i))
		sizes[l]++
	}
	lo, hi := min(res.Centers[0], res.Centers[2]), max(res.Centers[0], res.Centers[2])
	fmt.Printf("seen %d rows, sampled %d\n", r.Seen(), sample.N)
	fmt.Printf("centres near %.0f and %.0f\n", math.Round(lo), math.Round(hi))
	fmt.Printf("scored: %d and %d rows\n", sizes[0], sizes[1])
	// Output:
	// seen 100000 rows, sampled 2000
	// centres near 0 and 100
	// scored: 50000 and 50000 rows
}
