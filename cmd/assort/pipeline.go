package main

import (
	"context"
	"fmt"
	"sync"

	"github.com/jackc/pgx/v5"

	"assort/dbio"
	"assort/fit"
)

// A scoring pass runs as a pipeline of three stages at once, so that
// reading, the numerics and the COPY to the server overlap:
//
//	feed ──▶ W workers ──▶ COPY writer
//
// The feed (one goroutine) cuts the rows into batches of at most
// storeChunkRows consecutive rows, in order: from a store (chunk c = 0, 1,
// ... with its keys), or from a new read of the query in the run's read
// transaction (sample mode and `assort score`), scaled as the fit's rows
// were. W workers compute each batch's outputs under the model. The COPY
// callback (dbio.CopyIn's, on the caller's goroutine) takes finished
// batches strictly in order, encodes them and returns them to the pool.
// There are 2W batches in all, so at most 2W are in flight and memory does
// not grow with the rows; nothing is ever held per row of the table.
// Every row's outputs depend on that row alone, and batches are encoded in
// order, so the rows written are the same for any W.

// batch is a piece of a pass: up to storeChunkRows consecutive rows, their
// keys and scaled features, and the outputs the workers compute for them.
type batch struct {
	seq  int // position in the pass, from 0
	n    int // rows
	keys dbio.Keys
	x    []float64 // n×d scaled features; may be a memory store's own, read only
	buf  []float64 // the batch's own storage for features

	label            []int32   // fitted cluster, 0-based
	prob, dist, logd []float64 // membership of that cluster, distance, log density
	mem              []float64 // n×k memberships; memberships passes only
}

// outputs sizes the output slices for n rows and k clusters; mem says
// whether the memberships are kept.
func (b *batch) outputs(k int, mem bool) {
	n := b.n
	if cap(b.label) < n {
		c := storeChunkRows
		b.label, b.prob, b.dist, b.logd = make([]int32, c), make([]float64, c), make([]float64, c), make([]float64, c)
	}
	b.label, b.prob, b.dist, b.logd = b.label[:n], b.prob[:n], b.dist[:n], b.logd[:n]
	if mem {
		if cap(b.mem) < n*k {
			b.mem = make([]float64, storeChunkRows*k)
		}
		b.mem = b.mem[:n*k]
	}
}

// rowFeed yields a pass's rows in order. next fills b.keys, b.x and b.n
// with the next rows and reports false at the end; close releases what
// the feed holds. Both are called from one goroutine.
type rowFeed interface {
	next(b *batch) (bool, error)
	close() error
}

// feedFunc opens a new pass over a run's rows, from the first; ctx governs
// the pass.
type feedFunc func(ctx context.Context) (rowFeed, error)

// storeFeed is a pass over a store: keys from the store, scaled features
// from rows (the store itself when scaled in place, or a scaledSource
// over it).
type storeFeed struct {
	keys rowStore
	rows fit.Source
	c    int
}

// storeFeedFunc opens passes over a store.
func storeFeedFunc(keys rowStore, rows fit.Source) feedFunc {
	return func(context.Context) (rowFeed, error) { return &storeFeed{keys: keys, rows: rows}, nil }
}

func (f *storeFeed) next(b *batch) (bool, error) {
	if f.c == f.rows.Chunks() {
		return false, nil
	}
	d := f.rows.Dim()
	if b.buf == nil {
		b.buf = make([]float64, 0, storeChunkRows*d)
	}
	b.keys.Reset()
	if err := f.keys.ChunkKeys(f.c, &b.keys); err != nil {
		return false, err
	}
	x, _, err := f.rows.Chunk(f.c, b.buf)
	if err != nil {
		return false, err
	}
	b.x, b.n = x, len(x)/d
	if b.n != b.keys.Len() {
		panic(fmt.Sprintf("assort: store chunk %d has %d rows and %d keys", f.c, b.n, b.keys.Len()))
	}
	f.c++
	return true, nil
}

func (f *storeFeed) close() error { return nil }

// readCounts are the counts of a read of the query.
type readCounts struct {
	read, skipped int64
}

// readerFeed is a pass over a new read of the query: each reader chunk is
// cut into batches of storeChunkRows rows, scaled by sc (when not nil) as
// they are copied into the batch.
type readerFeed struct {
	r      *dbio.Reader
	sc     *fit.Scaling
	d      int
	cur    *dbio.Chunk
	pos    int
	counts *readCounts
}

func (f *readerFeed) next(b *batch) (bool, error) {
	for f.cur == nil || f.pos == f.cur.N {
		if !f.r.Next() {
			if err := f.r.Err(); err != nil {
				return false, fmt.Errorf("read: %w", err)
			}
			return false, nil
		}
		f.cur, f.pos = f.r.Chunk(), 0
	}
	d := f.d
	n := min(storeChunkRows, f.cur.N-f.pos)
	if b.buf == nil {
		b.buf = make([]float64, 0, storeChunkRows*d)
	}
	b.keys.Reset()
	for i := f.pos; i < f.pos+n; i++ {
		b.keys.Append(f.cur.Keys.At(i))
	}
	src := f.cur.X[f.pos*d : (f.pos+n)*d]
	b.x = b.buf[:n*d]
	if f.sc != nil {
		f.sc.Apply(b.x, src)
	} else {
		copy(b.x, src)
	}
	b.n = n
	f.pos += n
	return true, nil
}

func (f *readerFeed) close() error {
	err := f.r.Close()
	if f.counts != nil {
		f.counts.read, f.counts.skipped = f.r.RowsRead(), f.r.RowsSkipped()
	}
	if err != nil {
		return fmt.Errorf("read: %w", err)
	}
	return nil
}

// pipeline runs a pass's feed and workers; its consumer calls next and
// release on one goroutine, and stop at the end.
type pipeline struct {
	ctx     context.Context
	cancel  context.CancelFunc
	free    chan *batch // batches to fill
	todo    chan *batch // filled, to compute
	done    chan *batch // computed, in any order; closed when the workers end
	pending map[int]*batch
	want    int

	finished chan struct{} // closed once the feed and the workers have returned
	feedErr  error         // the feed's error; read after done is closed
	closeErr error         // the feed's close error; likewise
	stopped  bool
}

// startPipeline opens a pass with open and starts its feed and workers
// goroutines of work, which computes a batch's outputs; scratch is a
// worker's own k values.
func startPipeline(ctx context.Context, open feedFunc, workers, k int, work func(b *batch, scratch []float64)) (*pipeline, error) {
	ctx, cancel := context.WithCancel(ctx)
	feed, err := open(ctx)
	if err != nil {
		cancel()
		return nil, err
	}
	slots := 2 * workers
	p := &pipeline{
		ctx: ctx, cancel: cancel,
		free: make(chan *batch, slots), todo: make(chan *batch, slots), done: make(chan *batch, slots),
		pending: make(map[int]*batch, slots), finished: make(chan struct{}),
	}
	for range slots {
		p.free <- &batch{}
	}
	var wg sync.WaitGroup
	wg.Add(1 + workers)
	go func() {
		defer wg.Done()
		defer close(p.todo)
		defer func() { p.closeErr = feed.close() }()
		for seq := 0; ; seq++ {
			var b *batch
			select {
			case b = <-p.free:
			case <-ctx.Done():
				return
			}
			more, err := feed.next(b)
			if err != nil {
				p.feedErr = err
				return
			}
			if !more {
				return
			}
			b.seq = seq
			p.todo <- b // never blocks: there are only len(todo) batches
		}
	}()
	for range workers {
		go func() {
			defer wg.Done()
			scratch := make([]float64, max(k, 1))
			for b := range p.todo {
				work(b, scratch)
				p.done <- b // never blocks, likewise
			}
		}()
	}
	go func() {
		wg.Wait()
		close(p.done)
		close(p.finished)
	}()
	return p, nil
}

// next returns the next batch in order, nil at the end of the pass, or
// the error that ended it (the feed's, or ctx's).
func (p *pipeline) next() (*batch, error) {
	for {
		if b, ok := p.pending[p.want]; ok {
			delete(p.pending, p.want)
			p.want++
			return b, nil
		}
		b, ok := <-p.done
		if !ok {
			if p.feedErr != nil {
				return nil, p.feedErr
			}
			if err := p.ctx.Err(); err != nil {
				return nil, err
			}
			if len(p.pending) > 0 {
				panic(fmt.Sprintf("assort: pipeline ended with %d batches after batch %d", len(p.pending), p.want))
			}
			return nil, nil
		}
		p.pending[b.seq] = b
	}
}

// release gives a batch back to the feed.
func (p *pipeline) release(b *batch) { p.free <- b }

// stop ends the pass, at once if it is still running, waits for its
// goroutines and returns the feed's close error. It is idempotent.
func (p *pipeline) stop() error {
	if !p.stopped {
		p.stopped = true
		p.cancel()
		<-p.finished
	}
	return p.closeErr
}

// passSpec is one pipelined pass that writes rows with COPY.
type passSpec struct {
	name    string // for the progress line
	total   int64  // rows the pass will produce, 0 when not known
	want    int64  // rows an earlier pass saw, which this one must see too; -1 when none did
	open    feedFunc
	workers int
	k       int
	// work computes a batch's outputs; scratch is the worker's own k
	// values.
	work func(b *batch, scratch []float64)
	// encode writes the COPY rows of row i of b.
	encode func(enc *dbio.Encoder, b *batch, i int)
	// started, when set, is called once the first rows have been encoded.
	started func() error
}

// passResult is what a pass counted: its rows and, when its work labels
// rows, the rows of each fitted cluster.
type passResult struct {
	rows  int64
	sizes []int64
}

// copyPass runs ps and COPYs what it encodes into table's columns, within
// whatever transaction conn is in, which must have created table: the rows
// are written frozen (dbio.CopyFrozen), as every table assort fills is new
// and written once. An error of the feed (a bad row, a lost
// read) is returned as it is; the COPY is then abandoned.
func copyPass(ctx context.Context, e *env, conn *pgx.Conn, table pgx.Identifier, cols []string, ps passSpec) (passResult, error) {
	res := passResult{sizes: make([]int64, ps.k)}
	p, err := startPipeline(ctx, ps.open, ps.workers, ps.k, ps.work)
	if err != nil {
		return res, err
	}
	defer p.stop()
	m := e.meter(ps.name, ps.total)
	defer m.end()
	var (
		cur     *batch
		pos     int
		called  bool
		pipeErr error
	)
	_, err = dbio.CopyIn(ctx, conn.PgConn(), table, cols, dbio.CopyFrozen, func(enc *dbio.Encoder) (bool, error) {
		if ps.started != nil && !called && (res.rows > 0 || pos > 0) {
			called = true
			if err := ps.started(); err != nil {
				return false, err
			}
		}
		if cur == nil {
			b, err := p.next()
			if err != nil {
				pipeErr = err
				return false, err
			}
			if b == nil {
				return false, nil
			}
			cur, pos = b, 0
		}
		end := min(pos+copyBatch, cur.n)
		for ; pos < end; pos++ {
			ps.encode(enc, cur, pos)
		}
		if pos == cur.n {
			if len(res.sizes) > 0 && len(cur.label) == cur.n {
				for _, l := range cur.label {
					res.sizes[l]++
				}
			}
			res.rows += int64(cur.n)
			m.add(cur.n)
			p.release(cur)
			cur = nil
		}
		return true, nil
	})
	if pipeErr != nil {
		return res, pipeErr
	}
	if err != nil {
		return res, err
	}
	if err := p.stop(); err != nil {
		return res, err
	}
	if ps.want >= 0 && res.rows != ps.want {
		return res, passMismatch(ps.want, res.rows)
	}
	return res, nil
}
