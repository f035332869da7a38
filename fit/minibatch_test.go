package fit

import (
	"context"
	"math"
	"math/rand/v2"
	"reflect"
	"runtime"
	"testing"
)

func TestMiniBatchDeterministic(t *testing.T) {
	x := kmBlobs(40_000, 4, 8, 51)
	rng := rand.New(rand.NewPCG(5, 1))
	for i := range x {
		x[i] += 3 * rng.NormFloat64()
	}
	dense := &Dense{N: 40_000, D: 4, X: x, ChunkRows: 1500}
	// The same rows behind a type that is not *Dense take the chunked
	// gathering path, which must give the same batches.
	chunked := kmFailingSource{dense, -1}
	// 4096 rows × K 8 × d 4 = 2¹⁷ multiply-adds per batch: the batch's
	// assignments are split among the workers.
	cfg := KMeansConfig{K: 8, Seed: 9, Restarts: 2, Algorithm: AlgorithmMiniBatch, BatchRows: 4096, MaxIter: 60}
	var ref *KMeansResult
	tests := []struct {
		name       string
		src        Source
		workers    int
		gomaxprocs int
	}{
		{"workers 1", dense, 1, 0},
		{"workers 2", dense, 2, 0},
		{"workers 8", dense, 8, 0},
		{"GOMAXPROCS 1", dense, 0, 1},
		{"GOMAXPROCS 2", dense, 0, 2},
		{"chunked source, workers 3", chunked, 3, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if tt.gomaxprocs > 0 {
				defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(tt.gomaxprocs))
			}
			c := cfg
			c.Workers = tt.workers
			res, err := KMeans(context.Background(), tt.src, c)
			if err != nil {
				t.Fatal(err)
			}
			if ref == nil {
				ref = res
				if res.Algorithm != "minibatch, kmeans++ seeding" {
					t.Errorf("Algorithm %q", res.Algorithm)
				}
				return
			}
			if !reflect.DeepEqual(res, ref) {
				t.Errorf("result differs from workers 1:\n got %+v\nwant %+v", res, ref)
			}
		})
	}
}

// TestMiniBatchNearLloyd: on blobs, mini-batch k-means ends within 1% of
// the inertia of Lloyd's iterations from the same seeding, and its sizes
// and inertia are those of a direct assignment to its centres.
func TestMiniBatchNearLloyd(t *testing.T) {
	tests := []struct {
		name    string
		n, d, k int
		noise   float64
		seeding string
		batch   int
	}{
		{"separated d=2 k=5", 50_000, 2, 5, 0, SeedingGreedy, 0},
		{"overlapping d=4 k=8", 50_000, 4, 8, 3, SeedingGreedy, 0},
		{"overlapping d=8 k=6 k-means||", 50_000, 8, 6, 4, SeedingScalable, 512},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			x := kmBlobs(tt.n, tt.d, tt.k, 61)
			rng := rand.New(rand.NewPCG(6, 1))
			for i := range x {
				x[i] += tt.noise * rng.NormFloat64()
			}
			src := NewDense(x, tt.d)
			cfg := KMeansConfig{K: tt.k, Seed: 4, Restarts: 3, Seeding: tt.seeding, BatchRows: tt.batch}
			cfg.Algorithm = AlgorithmLloyd
			lloyd, err := KMeans(context.Background(), src, cfg)
			if err != nil {
				t.Fatal(err)
			}
			cfg.Algorithm = AlgorithmMiniBatch
			mb, err := KMeans(context.Background(), src, cfg)
			if err != nil {
				t.Fatal(err)
			}
			t.Logf("Lloyd %.6g (%d iterations), mini-batch %.6g (%d batches, %s), ratio %.5f",
				lloyd.Inertia, lloyd.Iterations, mb.Inertia, mb.Iterations, mb.Stop, mb.Inertia/lloyd.Inertia)
			if mb.Inertia > 1.01*lloyd.Inertia {
				t.Errorf("mini-batch inertia %.6g above 1.01 × Lloyd's %.6g", mb.Inertia, lloyd.Inertia)
			}
			in, sizes := kmDirectInertia(x, tt.d, mb.Centers)
			if !reflect.DeepEqual(mb.Sizes, sizes) || math.Abs(mb.Inertia-in) > 1e-12*in {
				t.Errorf("sizes %v inertia %.17g; direct %v %.17g", mb.Sizes, mb.Inertia, sizes, in)
			}
			if !mb.Converged || mb.Stop != stopShift {
				t.Errorf("stop %q converged %v, want the shift tolerance", mb.Stop, mb.Converged)
			}
		})
	}
}

func TestMiniBatchHandChecked(t *testing.T) {
	// Two groups of identical rows, 0 and 10 (d = 1). Seeding picks one
	// row of each; every batch moves each centre to the running mean of
	// rows equal to it, so the centres never move, inertia is 0, and the
	// window test first applies, and passes, after W = 10 batches.
	x := make([]float64, 1000)
	for i := range x {
		x[i] = float64(10 * (i % 2))
	}
	src := NewDense(x, 1)
	tests := []struct {
		name      string
		maxIter   int
		iters     int
		stop      string
		converged bool
	}{
		{"window", 0, miniBatchWindow, stopShift, true},
		{"limit", 3, 3, stopLimit, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			res, err := KMeans(context.Background(), src, KMeansConfig{K: 2, Seed: 1, Restarts: 1, Algorithm: AlgorithmMiniBatch, BatchRows: 64, MaxIter: tt.maxIter})
			if err != nil {
				t.Fatal(err)
			}
			if res.Iterations != tt.iters || res.Stop != tt.stop || res.Converged != tt.converged {
				t.Errorf("%d batches, stop %q, converged %v; want %d, %q, %v", res.Iterations, res.Stop, res.Converged, tt.iters, tt.stop, tt.converged)
			}
			if res.Inertia != 0 || res.Centers[0] != 0 || res.Centers[1] != 10 || res.Sizes[0] != 500 || res.Sizes[1] != 500 {
				t.Errorf("centres %v sizes %v inertia %v; want [0 10] [500 500] 0", res.Centers, res.Sizes, res.Inertia)
			}
			// 64·2 per batch, then the final pass of 1000·2; seeding: n for
			// D² from the first centre and n·trials (trials 2) to rate the
			// candidates for the second.
			if want := int64(64*2*tt.iters + 1000*2 + 1000 + 1000*2); res.DistanceEvals != want {
				t.Errorf("DistanceEvals %d, want %d", res.DistanceEvals, want)
			}
		})
	}
}

// TestMiniBatchRunningMean: with K = 1 every drawn row joins the one
// centre with rate 1/v, so after t batches the centre is the mean of the
// t·b rows drawn. The draws are replayed from the restart's stream: one
// IntN(n) for the seeding (K = 1), then b per batch.
func TestMiniBatchRunningMean(t *testing.T) {
	const n, b, batches = 997, 50, 7
	rng := rand.New(rand.NewPCG(8, 8))
	x := kmRandRows(rng, n, 3)
	src := NewDense(x, 3)
	res, err := KMeans(context.Background(), src, KMeansConfig{K: 1, Seed: 21, Restarts: 1, Algorithm: AlgorithmMiniBatch, BatchRows: b, MaxIter: batches})
	if err != nil {
		t.Fatal(err)
	}
	replay := rand.New(rand.NewPCG(21, 0))
	replay.IntN(n)
	var sum [3]float64
	for range b * batches {
		i := replay.IntN(n)
		for f := range 3 {
			sum[f] += x[i*3+f]
		}
	}
	for f := range 3 {
		want := sum[f] / (b * batches)
		if got := res.Centers[f]; math.Abs(got-want) > 1e-12*(1+math.Abs(want)) {
			t.Errorf("feature %d: centre %.15g, mean of the drawn rows %.15g", f, got, want)
		}
	}
	if res.Iterations != batches || res.Sizes[0] != n {
		t.Errorf("%d batches, size %d; want %d, %d", res.Iterations, res.Sizes[0], batches, n)
	}
}

func TestDefaultMiniBatches(t *testing.T) {
	tests := []struct {
		name     string
		n, batch int
		want     int
	}{
		{"one batch of all rows", 1000, 1024, 100},
		{"20 batches per pass", 20_000, 1024, 2000},
		{"at the cap", 102_400, 1024, 10_000},
		{"capped", 100_000_000, 1024, 10_000},
		{"batch larger than the table", 10, 1024, 100},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := defaultMiniBatches(tt.n, tt.batch); got != tt.want {
				t.Errorf("defaultMiniBatches(%d, %d) = %d, want %d", tt.n, tt.batch, got, tt.want)
			}
		})
	}
}

// BenchmarkMiniBatch fits one restart on 10⁶ rows × 8 features of
// overlapping blobs, K = 8, seeded by k-means||.
func BenchmarkMiniBatch(b *testing.B) {
	const n, d, k = 1_000_000, 8, 8
	x := kmBlobs(n, d, k, 1)
	rng := rand.New(rand.NewPCG(2, 2))
	for i := range x {
		x[i] += 5 * rng.NormFloat64()
	}
	src := NewDense(x, d)
	batches := 0
	for b.Loop() {
		res, err := KMeans(context.Background(), src, KMeansConfig{K: k, Seed: 3, Restarts: 1, Algorithm: AlgorithmMiniBatch, Seeding: SeedingScalable})
		if err != nil {
			b.Fatal(err)
		}
		batches += res.Iterations
	}
	b.ReportMetric(float64(batches)/float64(b.N), "batches")
}
