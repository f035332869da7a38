package fit

import (
	"context"
	"runtime"
	"sync"
)

// workerCount turns a configured worker count into a usable one: zero or
// negative means GOMAXPROCS.
func workerCount(w int) int {
	if w <= 0 {
		return runtime.GOMAXPROCS(0)
	}
	return w
}

// eachChunk calls fn once for every chunk of src, on up to workers
// goroutines. Each call receives a worker index w in [0, workers) so that fn
// can use per-worker scratch space; results that must be reduced
// deterministically should be stored by chunk index c and summed by the
// caller in chunk order, never in completion order.
//
// The first error (from the source, fn or ctx) stops further chunks from
// starting and is returned.
func eachChunk(ctx context.Context, src Source, workers int, fn func(w, c int, rows []float64, first int) error) error {
	n := src.Chunks()
	workers = min(workerCount(workers), max(n, 1))
	var (
		mu   sync.Mutex
		next int
		err  error
		wg   sync.WaitGroup
	)
	take := func() (int, bool) {
		mu.Lock()
		defer mu.Unlock()
		if err != nil || next >= n {
			return 0, false
		}
		if e := ctx.Err(); e != nil {
			err = e
			return 0, false
		}
		c := next
		next++
		return c, true
	}
	fail := func(e error) {
		mu.Lock()
		if err == nil {
			err = e
		}
		mu.Unlock()
	}
	for w := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var buf []float64
			for {
				c, ok := take()
				if !ok {
					return
				}
				rows, first, e := src.Chunk(c, buf)
				if e != nil {
					fail(e)
					return
				}
				if cap(rows) > cap(buf) {
					buf = rows[:0]
				}
				if e := fn(w, c, rows, first); e != nil {
					fail(e)
					return
				}
			}
		}()
	}
	wg.Wait()
	return err
}
