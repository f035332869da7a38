package main

import (
	"fmt"
	"math"
	"runtime"
	"runtime/debug"

	"assort/dbio"
	"assort/fit"
)

// The memory plan.
//
// --memory B bounds what a run holds for rows and for the work on them. A
// run goes through phases that do not overlap: reading, fitting, writing
// (and, for a sample, sampling then fitting then scoring), so what must fit
// in B is what stays resident (the rows, when they are kept in memory)
// plus the largest phase's working set, with n rows and d features:
//
//	read   = R·(8d + 8 + κ) + 2 MiB
//	         a chunk of R rows from the server (features, key ends, keys of
//	         κ bytes) and the COPY's buffers in dbio (the decoder's 1 MiB,
//	         and up to 1 MiB of data received and not yet decoded);
//	fit    = ρ·n + W·S·(8d + 12) + model
//	         ρ bytes of the fit's per-row state (see perRow), and per worker
//	         a chunk of S rows read from a spill plus its labels and
//	         distances; model = 8·k·d·(6 + W) for k-means (centres, sums,
//	         shifts, the best restart, per-worker partial sums), or
//	         8·k·(d² + d + 1)·(8 + W) + W·(256 KiB + 8·256·(2k + d + 4))
//	         for mixtures (parameters, factors, statistics and each
//	         worker's block of whitened rows);
//	write  = 2W·S·(8d + 8 + κ + 28 [+ 8k]) + 3 MiB
//	         the 2W chunks of S rows in flight in the scoring pipeline, with
//	         their outputs (a label and three float8; a mixture's k
//	         memberships in the memberships pass), and dbio.CopyIn's encoder
//	         buffer and pipe.
//
// Here R is --chunk-rows, S = storeChunkRows (4096) the rows per chunk of
// a store, W the workers, k the largest candidate and κ a guess of a key's
// bytes from its type (2, 4, 8 or 16 for int2, int4, int8 and uuid, 32 for
// anything else; the rows kept in memory are measured, not guessed).
//
// Rows stay in memory while the memory store's bytes, one store chunk of
// slack (S·(8d + 8 + κ), allocated whole before it fills) and
// max(read, fit, write) fit in B; when the next chunk would not, the rows
// go to a spill file and reading goes on into it. A spilled run still
// needs max(read, fit, write) ≤ B, which grows with n through ρ·n: when
// it no longer fits, the run stops with an error that says how much it
// needs. --sample m keeps m rows (8d + 8 bytes each in the reservoir, then
// 8d as the fitted sample) instead of a store.
//
// Not counted in B, and documented as the overhead: the Go runtime and
// the program's code, the two connections' buffers, goroutine stacks,
// the registry rows and a few dozen bytes per store chunk (seeding
// potentials, a spill's key offsets), in all well under memoryOverhead.
// The run also sets the Go runtime's soft memory limit to B plus that
// overhead (unless a lower one is set, as by GOMEMLIMIT), so that garbage
// is collected before the heap outgrows the plan.
const (
	// defaultMemory is --memory's default.
	defaultMemory = "2GiB"
	// memoryOverhead is the memory a run takes besides --memory.
	memoryOverhead = 32 << 20
	// storeChunkRows is S, the rows per chunk of a memory store or a
	// spill, and so of every pass of the fit and of the scoring
	// pipeline. It is the fit's own default chunk: results do not depend
	// on --chunk-rows, or on whether the rows were spilled.
	storeChunkRows = fit.DefaultChunkRows
	// minReadRows is the smallest chunk --chunk-rows' default shrinks to
	// under a small --memory.
	minReadRows = 1024
	// readBufBytes is the COPY's buffers in dbio: the decoder's 1 MiB and
	// up to 1 MiB of received data.
	readBufBytes = 2 << 20
	// copyInBytes is dbio.CopyIn's encoder buffer (1.25 MiB), a piece of
	// up to 1 MiB in its pipe, and the part of a chunk being encoded.
	copyInBytes = 3 << 20
	// mixBlockBytes is a mixture worker's block of whitened rows
	// (fit's mixBlockFloats float64).
	mixBlockBytes = 256 << 10
)

// memPlan is how a run divides --memory; see the comment above.
type memPlan struct {
	budget   int64
	d        int
	k        int    // the largest candidate k, or the stored model's
	workers  int    // W, at least 1
	readRows int    // R
	keyBytes int64  // κ
	method   string // "kmeans" or "gmm"
	// scoring is true for a run that scores with a stored model: it has
	// no fit phase.
	scoring bool
	// initKMeans is true when a mixture's first restart starts from a
	// k-means fit (--init kmeans), whose state is larger.
	initKMeans bool
}

// newMemPlan plans a run over rows of d features whose key has type
// keyType. chunkRows is --chunk-rows (0: the default, shrunk to fit a
// small budget; see readRowsFor), workers --workers (0: GOMAXPROCS).
func newMemPlan(budget int64, d int, keyType uint32, chunkRows, workers int, method string, k int, initKMeans bool) *memPlan {
	p := &memPlan{
		budget: budget, d: d, k: k, workers: workerCount(workers),
		keyBytes: keyGuess(keyType), method: method, initKMeans: initKMeans,
	}
	p.readRows = readRowsFor(budget, p.rowBytes(), chunkRows)
	return p
}

// readRowsFor is R: chunkRows when given; otherwise dbio's default
// (65536), halved while a chunk would take more than an eighth of the
// budget, down to minReadRows. The chunking of the read does not change
// any result (stores re-chunk rows by storeChunkRows), only the memory
// and the number of round trips between the reader and the decoder.
func readRowsFor(budget, rowBytes int64, chunkRows int) int {
	if chunkRows > 0 {
		return chunkRows
	}
	r := dbio.DefaultChunkRows
	for r > minReadRows && int64(r)*rowBytes > budget/8 {
		r /= 2
	}
	return r
}

// keyGuess is κ, the bytes of a key of the given type: exact for the
// fixed-size types keys usually have, 32 for the rest.
func keyGuess(oid uint32) int64 {
	switch oid {
	case 21: // int2
		return 2
	case 23: // int4
		return 4
	case 20, 701: // int8, float8
		return 8
	case 2950: // uuid
		return 16
	}
	return 32
}

// workerCount resolves --workers: 0 means GOMAXPROCS, as in fit.
func workerCount(w int) int {
	if w > 0 {
		return w
	}
	return max(1, runtime.GOMAXPROCS(0))
}

// rowBytes is a row held in memory: its features, key end and key.
func (p *memPlan) rowBytes() int64 { return int64(8*p.d+8) + p.keyBytes }

// storeSlack is one store chunk, allocated whole before it fills.
func (p *memPlan) storeSlack() int64 { return storeChunkRows * p.rowBytes() }

// readBytes is the read phase's working set.
func (p *memPlan) readBytes() int64 { return int64(p.readRows)*p.rowBytes() + readBufBytes }

// perRow is ρ, the fit's state per row: for k-means a label (int32) and a
// seeding distance (float64), 12 bytes, and with Hamerly's iterations two
// bounds more, 28; for a mixture 8 (k-means++ seeding distances), or 28
// when its first restart runs k-means (fit's own choice of iterations).
// The robust scaling's 8 bytes per row come before the fit and never add
// to it.
func (p *memPlan) perRow(hamerly bool) int64 {
	switch {
	case p.scoring:
		return 0
	case p.method == "kmeans" && hamerly:
		return 28
	case p.method == "kmeans":
		return 12
	case p.method == "gmm" && p.initKMeans:
		return 28
	case p.method == "gmm":
		return 8
	}
	return 0
}

// modelBytes is the fitted model and its working copies.
func (p *memPlan) modelBytes() int64 {
	k, d, w := int64(p.k), int64(p.d), int64(p.workers)
	if p.method == "gmm" {
		return 8*k*(d*d+d+1)*(8+w) + w*(mixBlockBytes+8*256*(2*k+d+4))
	}
	return 8 * k * d * (6 + w)
}

// fitBytes is the fit phase's working set for n rows.
func (p *memPlan) fitBytes(n int64, hamerly bool) int64 {
	if p.scoring {
		return 0
	}
	return p.perRow(hamerly)*n + int64(p.workers)*storeChunkRows*int64(8*p.d+12) + p.modelBytes()
}

// writeBytes is the write phase's working set: the pipeline's chunks in
// flight and the COPY's buffers.
func (p *memPlan) writeBytes() int64 {
	out := int64(28)
	if p.method == "gmm" {
		out += 8 * int64(p.k)
	}
	return 2*int64(p.workers)*storeChunkRows*(p.rowBytes()+out) + copyInBytes
}

// working is max(read, fit, write) for n rows.
func (p *memPlan) working(n int64, hamerly bool) int64 {
	return max(p.readBytes(), p.fitBytes(n, hamerly), p.writeBytes())
}

// check rejects a budget too small for even one chunk and the model.
func (p *memPlan) check(memFlag string) error {
	need := p.working(storeChunkRows, false)
	if p.budget >= need {
		return nil
	}
	what := fmt.Sprintf("reading, fitting and writing rows of %d features with k = %d", p.d, p.k)
	if p.scoring {
		what = fmt.Sprintf("reading and scoring rows of %d features", p.d)
	}
	return fmt.Errorf("%s %s is too small: %s in chunks of %d rows with %d workers needs at least %s (%d bytes); raise %s%s",
		memFlag, dbio.FormatSize(p.budget), what, p.readRows, p.workers, dbio.FormatSize(need), need, memFlag, p.hint())
}

// hint suggests the other knobs when they weigh.
func (p *memPlan) hint() string {
	if p.readBytes() >= p.writeBytes() && p.readRows > minReadRows {
		return " or lower --chunk-rows"
	}
	if p.workers > 1 {
		return " or lower --workers"
	}
	return ""
}

// inMemory reports whether a memory store of storeBytes bytes holding n
// rows, and everything else the run needs for them, fit the budget.
func (p *memPlan) inMemory(storeBytes, n int64) bool {
	return storeBytes+p.storeSlack()+p.working(n, false) <= p.budget
}

// checkSpilled reports an error when n spilled rows need more than the
// budget: the fit's per-row state grows with them.
func (p *memPlan) checkSpilled(n int64) error {
	need := p.working(n, false)
	if need <= p.budget {
		return nil
	}
	return fmt.Errorf("rows exceed --memory %s even when spilled: fitting %d or more rows keeps %d bytes per row (labels, distances) besides its working space, %s in all; raise --memory to at least %s, or fit a sample (--sample)",
		dbio.FormatSize(p.budget), n, p.perRow(false), dbio.FormatSize(need), dbio.FormatSize(need))
}

// hamerly reports whether Hamerly's iterations, with their 16 more bytes
// per row, fit beside resident bytes for n rows. It is false for
// mixtures.
func (p *memPlan) hamerly(resident, n int64) bool {
	return p.method == "kmeans" && resident+p.working(n, true) <= p.budget
}

// sampleBytes is the peak of a run that fits a sample of m rows: sampling
// (the reservoir, 8d + 8 bytes a row, beside a read chunk), taking the
// sample out of the reservoir (a copy), fitting it, and scoring.
func (p *memPlan) sampleBytes(m int64, hamerly bool) int64 {
	d := int64(p.d)
	return max(p.readBytes()+m*(8*d+8), m*(16*d+8), m*8*d+p.fitBytes(m, hamerly), p.writeBytes())
}

// checkSample rejects a --sample too large for the budget.
func (p *memPlan) checkSample(m int64, flag string) error {
	need := p.sampleBytes(m, false)
	if need <= p.budget {
		return nil
	}
	return fmt.Errorf("%s needs %s (%d sampled rows of %d features, the fit's %d bytes per row and its working space), more than --memory %s; lower it or raise --memory to at least %s",
		flag, dbio.FormatSize(need), m, p.d, p.perRow(false), dbio.FormatSize(p.budget), dbio.FormatSize(need))
}

// algorithm is the k-means iterations that fit beside resident bytes: ""
// (fit's default by k·d) when Hamerly's bounds fit, else plain Lloyd.
func (p *memPlan) algorithm(resident, n int64) string {
	if p.hamerly(resident, n) {
		return ""
	}
	return fit.AlgorithmLloyd
}

// chooseAlgorithm combines --algorithm with what the memory plan allows
// (planned: "" when Hamerly's bounds fit, else lloyd).
func chooseAlgorithm(flag, planned string) (string, error) {
	switch flag {
	case "auto":
		return planned, nil
	case fit.AlgorithmHamerly:
		if planned == fit.AlgorithmLloyd {
			return "", fmt.Errorf("--algorithm hamerly needs 16 more bytes a row than --memory leaves; raise --memory or use --algorithm lloyd (the same result)")
		}
	}
	return flag, nil
}

// limitHeap sets the Go runtime's soft memory limit to budget plus
// memoryOverhead, unless a lower limit is in force, and returns the
// function that restores the previous limit.
func limitHeap(budget int64) (restore func()) {
	prev := debug.SetMemoryLimit(-1)
	limit := budget + memoryOverhead
	if budget > math.MaxInt64-memoryOverhead || limit >= prev {
		return func() {}
	}
	debug.SetMemoryLimit(limit)
	return func() { debug.SetMemoryLimit(prev) }
}
