package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"runtime"
	"slices"
	"testing"
)

// kmScalable runs seedScalable on src with a PCG stream (seed, 0).
func kmScalable(t testing.TB, src Source, k, trials, workers int, seed uint64) ([]float64, int64, error) {
	t.Helper()
	sum, err := summarize(context.Background(), src, workers)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 0))
	return seedScalable(context.Background(), src, &sum.chunkLayout, k, trials, workers, rng, make([]float64, src.Len()), make([]int32, src.Len()))
}

func TestScalableSeedingDeterministic(t *testing.T) {
	x := kmBlobs(30_000, 3, 7, 21)
	rng := rand.New(rand.NewPCG(2, 1))
	for i := range x {
		x[i] += 4 * rng.NormFloat64()
	}
	src := &Dense{N: 30_000, D: 3, X: x, ChunkRows: 999}
	var ref []float64
	var refEvals int64
	for _, tt := range parallelismCases {
		t.Run(tt.name, func(t *testing.T) {
			if tt.gomaxprocs > 0 {
				defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(tt.gomaxprocs))
			}
			c, evals, err := kmScalable(t, src, 7, 3, tt.workers, 5)
			if err != nil {
				t.Fatal(err)
			}
			if ref == nil {
				ref, refEvals = c, evals
				return
			}
			if !kmSameBits(c, ref) || evals != refEvals {
				t.Errorf("centres %v (%d distances), workers 1 gave %v (%d)", c, evals, ref, refEvals)
			}
		})
	}
	// A different seed gives different centres.
	c, _, err := kmScalable(t, src, 7, 3, 2, 6)
	if err != nil {
		t.Fatal(err)
	}
	if kmSameBits(c, ref) {
		t.Errorf("seeds 5 and 6 gave the same centres")
	}
}

// TestScalableSeedingOnePerBlob: on blobs 10 apart with unit noise, the
// seeds must land one in each blob, for ten seeds each. (With one trial
// per centre, plain k-means++ reclustering misses a blob now and then at
// K = 20, as plain k-means++ does on rows: the last centre alone falls
// in a covered blob with probability about 19·3/(19·3 + 300) ≈ 0.16.)
func TestScalableSeedingOnePerBlob(t *testing.T) {
	tests := []struct {
		name    string
		n, d, k int
		trials  int
	}{
		{"d=2 k=5", 10_000, 2, 5, 3},
		{"d=4 k=12", 24_000, 4, 12, 4},
		{"d=3 k=20", 20_000, 3, 20, defaultTrials(20)},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			src := &Dense{N: tt.n, D: tt.d, X: kmBlobs(tt.n, tt.d, tt.k, 31), ChunkRows: 1000}
			for seed := range uint64(10) {
				c, _, err := kmScalable(t, src, tt.k, tt.trials, 2, seed)
				if err != nil {
					t.Fatal(err)
				}
				hit := make([]int, tt.k)
				for j := range tt.k {
					// Blob b is centred at (10b, ..., 10b); rows are within
					// a few units of it.
					b := int(math.Round(c[j*tt.d] / 10))
					if b < 0 || b >= tt.k {
						t.Fatalf("seed %d: centre %v is in no blob", seed, c[j*tt.d:(j+1)*tt.d])
					}
					hit[b]++
				}
				for b, h := range hit {
					if h != 1 {
						t.Fatalf("seed %d: blob %d got %d centres (%v)", seed, b, h, hit)
					}
				}
			}
		})
	}
}

func TestScalableSeedingDistinctRows(t *testing.T) {
	// 400 rows, only 40 distinct (as TestSeedPicksDistinctRows).
	rng := rand.New(rand.NewPCG(3, 3))
	base := kmRandRows(rng, 40, 3)
	x := make([]float64, 0, 400*3)
	for i := range 400 {
		x = append(x, base[(i*7%40)*3:(i*7%40)*3+3]...)
	}
	src := &Dense{N: 400, D: 3, X: x, ChunkRows: 64}
	tests := []struct {
		name string
		k    int
		err  bool
	}{
		{"K 10", 10, false},
		{"every distinct row", 40, false},
		{"one too many", 41, true},
		{"K 1", 1, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c, _, err := kmScalable(t, src, tt.k, 3, 2, 17)
			if tt.err {
				if !errors.Is(err, errFewDistinct) {
					t.Fatalf("error %v, want one wrapping errFewDistinct", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			checkDistinctRows(t, c, base, tt.k, 3)
		})
	}
}

func TestSeedWeighted(t *testing.T) {
	// Five rows on a line; row 3 has weight 0 and must never be chosen.
	x := []float64{0, 1, 5, 6, 20}
	w := []float64{3, 1, 2, 0, 1}
	tests := []struct {
		name      string
		k, trials int
		want      []float64 // sorted centres; nil: error
	}{
		// Every row of positive weight.
		{"all positive rows", 4, 2, []float64{0, 1, 5, 20}},
		{"all positive rows, one trial", 4, 1, []float64{0, 1, 5, 20}},
		{"more than the positive rows", 5, 2, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			for seed := range uint64(20) {
				c, evals, err := seedWeighted(x, w, 1, tt.k, tt.trials, rand.New(rand.NewPCG(seed, 0)))
				if tt.want == nil {
					if !errors.Is(err, errFewDistinct) {
						t.Fatalf("error %v, want one wrapping errFewDistinct", err)
					}
					return
				}
				if err != nil {
					t.Fatal(err)
				}
				slices.Sort(c)
				if !slices.Equal(c, tt.want) {
					t.Fatalf("seed %d: centres %v, want %v", seed, c, tt.want)
				}
				// m per update of D² (K − 1 of them) and m·trials per rating
				// step when trials > 1 (K − 1 steps).
				m, k := int64(5), int64(tt.k)
				want := m * (k - 1)
				if tt.trials > 1 {
					want += m * int64(tt.trials) * (k - 1)
				}
				if evals != want {
					t.Fatalf("evals %d, want %d", evals, want)
				}
			}
		})
	}
	// The first centre is drawn with probability w/Σw: with all weight on
	// row 2, it is always row 2.
	for seed := range uint64(10) {
		c, _, err := seedWeighted(x, []float64{0, 0, 1, 0, 0}, 1, 1, 2, rand.New(rand.NewPCG(seed, 0)))
		if err != nil || c[0] != 5 {
			t.Fatalf("seed %d: centre %v (%v), want 5", seed, c, err)
		}
	}
}

// TestKMeansIrisScalableSeeding is the external check for k-means||
// seeding: K = 3 on raw iris reaches the optimum scikit-learn 1.2.1 finds
// (inertia 78.8514414261, sizes 62, 50, 38;
// testdata/iris_kmeans_reference.txt), with 20 restarts.
func TestKMeansIrisScalableSeeding(t *testing.T) {
	ref := kmReference(t)
	want := ref["inertia_sklearn"][0][0]
	for _, alg := range []string{AlgorithmLloyd, AlgorithmHamerly} {
		t.Run(alg, func(t *testing.T) {
			res, err := KMeans(context.Background(), kmIris(t), KMeansConfig{K: 3, Seed: 3, Restarts: 20, Seeding: SeedingScalable, Algorithm: alg})
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(res.Inertia-want) >= 1e-4 {
				t.Errorf("inertia = %.10f, want %.10f within 1e-4 (scikit-learn 1.2.1)", res.Inertia, want)
			}
			if !slices.Equal(res.Sizes, []int64{62, 50, 38}) {
				t.Errorf("sizes = %v, want [62 50 38] (scikit-learn 1.2.1)", res.Sizes)
			}
			if wantAlg := alg + ", kmeans|| seeding"; res.Algorithm != wantAlg {
				t.Errorf("Algorithm = %q, want %q", res.Algorithm, wantAlg)
			}
		})
	}
}

// BenchmarkKMeansParallelSeeding compares k-means|| with greedy k-means++
// on 10⁶ rows × 8 features of overlapping blobs, reporting the distances
// computed per row.
func BenchmarkKMeansParallelSeeding(b *testing.B) {
	const n, d = 1_000_000, 8
	for _, k := range []int{8, 32} {
		x := kmBlobs(n, d, k, 1)
		rng := rand.New(rand.NewPCG(2, 2))
		for i := range x {
			x[i] += 5 * rng.NormFloat64()
		}
		src := NewDense(x, d)
		sum, err := summarize(context.Background(), src, 0)
		if err != nil {
			b.Fatal(err)
		}
		closest, owner := make([]float64, n), make([]int32, n)
		for _, method := range []string{SeedingScalable, SeedingGreedy} {
			b.Run(fmt.Sprintf("%s/k=%d", method, k), func(b *testing.B) {
				var evals int64
				seed := uint64(0)
				for b.Loop() {
					rng := rand.New(rand.NewPCG(seed, 0))
					seed++
					var e int64
					var err error
					if method == SeedingScalable {
						_, e, err = seedScalable(context.Background(), src, &sum.chunkLayout, k, defaultTrials(k), 0, rng, closest, owner)
					} else {
						_, e, err = seedGreedy(context.Background(), src, &sum.chunkLayout, k, defaultTrials(k), 0, rng, closest)
					}
					if err != nil {
						b.Fatal(err)
					}
					evals += e
				}
				b.ReportMetric(float64(evals)/float64(b.N)/n, "evals/row")
			})
		}
	}
}

// TestKMeansAlgorithmsAgree checks the algorithm switch end to end: plain
// and Hamerly's Lloyd give the same KMeansResult apart from DistanceEvals
// and Algorithm, for either seeding, and the default picks Hamerly with
// greedy k-means++ below ScalableSeedingRows.
func TestKMeansAlgorithmsAgree(t *testing.T) {
	x := kmBlobs(6_000, 3, 5, 41)
	rng := rand.New(rand.NewPCG(1, 9))
	for i := range x {
		x[i] += 5 * rng.NormFloat64()
	}
	src := &Dense{N: 6_000, D: 3, X: x, ChunkRows: 700}
	for _, seeding := range []string{SeedingGreedy, SeedingScalable} {
		t.Run(seeding, func(t *testing.T) {
			cfg := KMeansConfig{K: 5, Seed: 12, Restarts: 4, Seeding: seeding}
			cfg.Algorithm = AlgorithmLloyd
			plain, err := KMeans(context.Background(), src, cfg)
			if err != nil {
				t.Fatal(err)
			}
			cfg.Algorithm = AlgorithmHamerly
			ham, err := KMeans(context.Background(), src, cfg)
			if err != nil {
				t.Fatal(err)
			}
			if ham.DistanceEvals >= plain.DistanceEvals {
				t.Errorf("Hamerly %d distances, plain %d", ham.DistanceEvals, plain.DistanceEvals)
			}
			if plain.Algorithm != "lloyd, "+seeding+" seeding" || ham.Algorithm != "hamerly, "+seeding+" seeding" {
				t.Errorf("Algorithm %q and %q", plain.Algorithm, ham.Algorithm)
			}
			if plain.Iterations < 3 {
				t.Errorf("only %d iterations", plain.Iterations)
			}
			ham.DistanceEvals, ham.Algorithm = plain.DistanceEvals, plain.Algorithm
			if !reflect.DeepEqual(ham, plain) {
				t.Errorf("results differ:\nhamerly %+v\n  lloyd %+v", ham, plain)
			}
		})
	}
	// The default is plain Lloyd while K·d <= hamerlyMinWork, Hamerly above.
	def, err := KMeans(context.Background(), src, KMeansConfig{K: 5, Seed: 12, Restarts: 1})
	if err != nil {
		t.Fatal(err)
	}
	want := "hamerly, kmeans++ seeding"
	if 5*src.Dim() <= hamerlyMinWork {
		want = "lloyd, kmeans++ seeding"
	}
	if def.Algorithm != want {
		t.Errorf("default Algorithm %q, want %q", def.Algorithm, want)
	}
	big, err := KMeans(context.Background(), src, KMeansConfig{K: hamerlyMinWork/src.Dim() + 1, Seed: 12, Restarts: 1})
	if err != nil {
		t.Fatal(err)
	}
	if big.Algorithm != "hamerly, kmeans++ seeding" {
		t.Errorf("default Algorithm for K·d > %d: %q, want hamerly", hamerlyMinWork, big.Algorithm)
	}
}

// TestKMeansDefaultSeedingLarge: from ScalableSeedingRows rows up, the
// default seeding is k-means||.
func TestKMeansDefaultSeedingLarge(t *testing.T) {
	src := NewDense(kmBlobs(ScalableSeedingRows, 1, 3, 2), 1)
	res, err := KMeans(context.Background(), src, KMeansConfig{K: 3, Seed: 1, Restarts: 1})
	if err != nil {
		t.Fatal(err)
	}
	if res.Algorithm != "lloyd, kmeans|| seeding" { // K·d = 3: plain Lloyd
		t.Errorf("Algorithm %q, want %q", res.Algorithm, "lloyd, kmeans|| seeding")
	}
	// Blobs at 0, 10, 20 in (nearly) equal thirds, so compare sorted.
	centers := slices.Clone(res.Centers)
	slices.Sort(centers)
	for j, want := range []float64{0, 10, 20} {
		if got := centers[j]; math.Abs(got-want) > 0.01 {
			t.Errorf("centre %d = %v, want %v within 0.01", j, got, want)
		}
	}
}
