package main

import (
	"context"
	"runtime"
	"sync"
	"sync/atomic"
	"time"
)

// maddBlock is the length of the slices a multiply-add worker sweeps: two
// of them, 16 KiB together, stay in any L1 data cache.
const maddBlock = 1024

// maddRate measures the machine's multiply-add rate: the number per second
// of steps t = a_i − b_i; s += t·t (the inner step of a squared Euclidean
// distance, which one Lloyd assignment pass repeats n·k·d times) that a
// tight Go loop achieves on GOMAXPROCS goroutines at once, for about dur.
// Each worker sweeps two L1-resident slices with four independent sums, so
// neither memory nor the adder's latency bounds it; it is scalar code as
// the Go compiler emits it, with no vector instructions. The rate is the
// total over all workers: the floor it gives is for work spread over all
// cores, as the fit's own is.
func maddRate(ctx context.Context, dur time.Duration) float64 {
	workers := runtime.GOMAXPROCS(0)
	var stop atomic.Bool
	blocks := make([]int64, workers)
	sums := make([]float64, workers)
	var wg sync.WaitGroup
	start := time.Now()
	for w := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			a := make([]float64, maddBlock)
			b := make([]float64, maddBlock)
			for i := range a {
				a[i] = float64(i%7) * 0.25
				b[i] = float64(i%5) * 0.5
			}
			var s0, s1, s2, s3 float64
			var n int64
			for !stop.Load() {
				for i := 0; i < maddBlock; i += 4 {
					t0 := a[i] - b[i]
					t1 := a[i+1] - b[i+1]
					t2 := a[i+2] - b[i+2]
					t3 := a[i+3] - b[i+3]
					s0 += t0 * t0
					s1 += t1 * t1
					s2 += t2 * t2
					s3 += t3 * t3
				}
				n++
			}
			blocks[w], sums[w] = n, s0+s1+s2+s3
		}()
	}
	select {
	case <-time.After(dur):
	case <-ctx.Done():
	}
	stop.Store(true)
	wg.Wait()
	elapsed := time.Since(start).Seconds()
	var total int64
	for _, n := range blocks {
		total += n
	}
	if sums[0] < 0 { // never: keeps the sums, and so the loop, alive
		return 0
	}
	return float64(total*maddBlock) / elapsed
}
