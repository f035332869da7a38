package main

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"

	"assort/dbio"
	"assort/fit"
)

// rowStore is where a fit keeps the rows it read: keys and features in
// chunks of storeChunkRows rows, the same chunks whether they are in
// memory (*dbio.MemStore) or spilled to a file (*dbio.Spill), so that the
// fit and the scoring pass see the same rows in the same order either
// way. Its features are a fit.Source.
type rowStore interface {
	Dim() int
	Len() int
	Chunks() int
	Chunk(c int, buf []float64) ([]float64, int, error)
	ChunkKeys(c int, dst *dbio.Keys) error
}

// storedRows is the result of a fit's read pass: the rows in memory or in
// a spill, and the counts of the read.
type storedRows struct {
	mem     *dbio.MemStore // nil once spilled
	spill   *dbio.Spill    // nil while in memory
	read    int64          // rows the query returned
	skipped int64          // rows left out under --missing skip
}

// store is the rows' store.
func (s *storedRows) store() rowStore {
	if s.spill != nil {
		return s.spill
	}
	return s.mem
}

// resident is the memory the rows take: all of them in memory, none when
// spilled.
func (s *storedRows) resident() int64 {
	if s.mem != nil {
		return s.mem.Bytes()
	}
	return 0
}

// remove deletes the spill, if any. It is idempotent.
func (s *storedRows) remove() error {
	if s == nil || s.spill == nil {
		return nil
	}
	return s.spill.Remove()
}

// spillSpec is where and how rows are spilled.
type spillSpec struct {
	dir     string // "" is os.TempDir()
	float32 bool
}

// readStore is the read pass of a fit that keeps every row: it reads the
// query's rows with rt and keeps them in memory while plan allows, and
// moves them to a spill in sp.dir as soon as the next chunk would not fit
// (see memPlan). The caller removes the spill (storedRows.remove), also
// on error: readStore returns what it made so far with its error.
func readStore(ctx context.Context, e *env, rt *readTx, plan *memPlan, sp spillSpec) (*storedRows, error) {
	d := len(rt.features)
	out := &storedRows{mem: dbio.NewMemStore(d, dbio.MemStoreConfig{ChunkRows: storeChunkRows})}
	m := e.meter("read", 0)
	defer m.end()
	r := rt.reader(ctx, plan.readRows)
	for r.Next() {
		c := r.Chunk()
		n := int64(out.store().Len() + c.N)
		if out.spill == nil {
			grow := int64(c.N)*int64(8*d+8) + int64(len(c.Keys.Data))
			if !plan.inMemory(out.mem.Bytes()+grow, n) {
				if err := out.toSpill(sp); err != nil {
					r.Close()
					return out, err
				}
				m.printf(e, "rows exceed --memory %s; spilling them to %s", dbio.FormatSize(plan.budget), out.spill.Path())
			}
		}
		if out.spill != nil {
			if err := plan.checkSpilled(n); err != nil {
				r.Close()
				return out, err
			}
			if err := out.spill.Append(c); err != nil {
				r.Close()
				return out, fmt.Errorf("read: %w", err)
			}
		} else {
			out.mem.Append(c)
		}
		m.add(c.N)
	}
	if err := endRead(r); err != nil {
		return out, err
	}
	out.read, out.skipped = r.RowsRead(), r.RowsSkipped()
	if out.spill != nil {
		if err := out.spill.Finish(); err != nil {
			return out, fmt.Errorf("read: %w", err)
		}
	}
	return out, nil
}

// endRead closes a reader that Next has stopped, and returns the error
// that stopped it, if any, or else Close's.
func endRead(r *dbio.Reader) error {
	if err := r.Err(); err != nil {
		return fmt.Errorf("read: %w", errors.Join(err, r.Close()))
	}
	if err := r.Close(); err != nil {
		return fmt.Errorf("read: %w", err)
	}
	return nil
}

// toSpill creates the spill and moves the rows in memory into it.
func (s *storedRows) toSpill(sp spillSpec) error {
	d := s.mem.Dim()
	spill, err := dbio.CreateSpill(sp.dir, d, dbio.SpillConfig{Float32: sp.float32, ChunkRows: storeChunkRows})
	if err != nil {
		return fmt.Errorf("--spill-dir: %w", err)
	}
	s.spill = spill
	if err := s.mem.Drain(spill.Append); err != nil {
		return fmt.Errorf("read: %w", err)
	}
	s.mem = nil
	return nil
}

// describe is the plan's decision, for the log.
func (s *storedRows) describe(plan *memPlan, sp spillSpec) string {
	if s.spill != nil {
		width := "float64"
		if sp.float32 {
			width = "float32"
		}
		return fmt.Sprintf("rows exceed --memory %s: spilled %d rows (%s, %s) to %s",
			dbio.FormatSize(plan.budget), s.spill.Len(), dbio.FormatSize(s.spill.Bytes()), width, spillDirName(sp.dir))
	}
	return fmt.Sprintf("rows in memory: %s of --memory %s", dbio.FormatSize(s.mem.Bytes()), dbio.FormatSize(plan.budget))
}

// spillDirName is the spill directory as given, or the default's name.
func spillDirName(dir string) string {
	if dir == "" {
		return os.TempDir()
	}
	return dir
}

// sampledRows is the result of the read pass of --sample: a uniform sample
// of the usable rows, without keys, and the counts of the read.
type sampledRows struct {
	x       *fit.Dense // the sampled rows, in the order the query returned them
	read    int64
	skipped int64
}

// readSample is the read pass of --sample: it streams the query's rows
// through a reservoir of capRows rows (fit.Reservoir, seeded by seed) and
// keeps nothing else. The rows are scored later by reading the query
// again in the same transaction (readTx), so in the same snapshot.
func readSample(ctx context.Context, e *env, rt *readTx, plan *memPlan, capRows int, seed uint64, total int64) (*sampledRows, error) {
	d := len(rt.features)
	res := fit.NewReservoir(capRows, d, seed)
	m := e.meter("sample", total)
	defer m.end()
	r := rt.reader(ctx, plan.readRows)
	for r.Next() {
		c := r.Chunk()
		res.Add(c.X[:c.N*d])
		m.add(c.N)
	}
	if err := endRead(r); err != nil {
		return nil, err
	}
	return &sampledRows{x: res.Sample(), read: r.RowsRead(), skipped: r.RowsSkipped()}, nil
}

// scaledSource is a fit.Source whose rows are those of src with a scaling
// applied: for a spill, whose rows are read into the caller's buffer each
// time. The scaled rows are written into buf, never into src's memory.
type scaledSource struct {
	src fit.Source
	sc  fit.Scaling
}

func (s *scaledSource) Dim() int    { return s.src.Dim() }
func (s *scaledSource) Len() int    { return s.src.Len() }
func (s *scaledSource) Chunks() int { return s.src.Chunks() }

func (s *scaledSource) Chunk(c int, buf []float64) ([]float64, int, error) {
	if need := storeChunkRows * s.src.Dim(); cap(buf) < need {
		buf = make([]float64, 0, need)
	}
	rows, first, err := s.src.Chunk(c, buf)
	if err != nil {
		return nil, 0, err
	}
	out := buf[:len(rows)]
	if len(rows) > cap(buf) {
		out = make([]float64, len(rows))
	}
	s.sc.Apply(out, rows)
	return out, first, nil
}

// countedSource is a fit.Source that counts the rows read from it on a
// meter, to show a fit's progress.
type countedSource struct {
	fit.Source
	m *meter
}

func (s *countedSource) Chunk(c int, buf []float64) ([]float64, int, error) {
	rows, first, err := s.Source.Chunk(c, buf)
	if err == nil {
		s.m.add(len(rows) / s.Source.Dim())
	}
	return rows, first, err
}

// fitData is what a fit's read pass produced under the memory plan: every
// usable row in a store, or a sample of them; and the counts of the read.
type fitData struct {
	plan    *memPlan
	stored  *storedRows  // every usable row; nil with --sample
	sample  *sampledRows // --sample's rows; nil otherwise
	capRows int64        // the sample's size asked for
	read    int64        // rows the query returned
	skipped int64        // rows left out under --missing skip
	spill   spillSpec
}

// readRows runs the read pass of a fit as s and plan ask: into a store
// (readStore), or through a reservoir (readSample). With
// --sample-fraction it first counts the query's rows in the snapshot.
func readRows(ctx context.Context, e *env, s *fitSpec, rt *readTx, plan *memPlan) (*fitData, error) {
	rd := &fitData{plan: plan, spill: spillSpec{dir: s.spillDir, float32: s.spillFloat32}}
	var total int64
	switch {
	case s.sample > 0:
		rd.capRows = s.sample
		if err := plan.checkSample(rd.capRows, fmt.Sprintf("--sample %d", s.sample)); err != nil {
			return rd, err
		}
	case s.sampleFraction > 0:
		n, err := rt.count(ctx)
		if err != nil {
			return rd, err
		}
		total = n
		rd.capRows = max(1, int64(math.Ceil(s.sampleFraction*float64(n))))
		if err := plan.checkSample(rd.capRows, fmt.Sprintf("--sample-fraction %g (%d of %d rows)", s.sampleFraction, rd.capRows, n)); err != nil {
			return rd, err
		}
	case s.spillDir != "":
		// Fail now, not after reading, when the spill directory is unusable.
		probe, err := dbio.CreateSpill(s.spillDir, len(rt.features), dbio.SpillConfig{})
		if err != nil {
			return rd, fmt.Errorf("--spill-dir: %w", err)
		}
		if err := probe.Remove(); err != nil {
			return rd, fmt.Errorf("--spill-dir: %w", err)
		}
	}
	if err := checkpoint(ctx, e, phaseRead); err != nil {
		return rd, err
	}
	if rd.capRows > 0 {
		smp, err := readSample(ctx, e, rt, plan, int(min(rd.capRows, math.MaxInt32)), s.seed, total)
		if err != nil {
			return rd, err
		}
		rd.sample, rd.read, rd.skipped = smp, smp.read, smp.skipped
		return rd, nil
	}
	st, err := readStore(ctx, e, rt, plan, rd.spill)
	rd.stored = st
	if err != nil {
		return rd, err
	}
	rd.read, rd.skipped = st.read, st.skipped
	if err := rt.end(ctx); err != nil {
		return rd, err
	}
	return rd, nil
}

// sampled reports whether the fit is on a sample.
func (rd *fitData) sampled() bool { return rd.sample != nil }

// fitRows is the number of rows the fit sees.
func (rd *fitData) fitRows() int {
	if rd.sample != nil {
		return rd.sample.x.N
	}
	return rd.stored.store().Len()
}

// usable is the number of rows to score.
func (rd *fitData) usable() int64 { return rd.read - rd.skipped }

// storage names where the fitted rows are: "memory", "spill" or "sample".
func (rd *fitData) storage() string {
	switch {
	case rd.sample != nil:
		return "sample"
	case rd.stored.spill != nil:
		return "spill"
	}
	return "memory"
}

// resident is the memory the fitted rows take.
func (rd *fitData) resident() int64 {
	if rd.sample != nil {
		return int64(len(rd.sample.x.X)) * 8
	}
	return rd.stored.resident()
}

// describe is the plan's decision, for the log before fitting.
func (rd *fitData) describe(s *fitSpec) string {
	if rd.sample == nil {
		return rd.stored.describe(rd.plan, rd.spill)
	}
	n := rd.sample.x.N
	if int64(n) < rd.capRows {
		if s.sample > 0 {
			return fmt.Sprintf("--sample %d is more than the %d usable rows: fitting all of them, then scoring them in a second read", s.sample, n)
		}
		return fmt.Sprintf("--sample-fraction %g takes all %d usable rows: fitting all of them, then scoring them in a second read", s.sampleFraction, n)
	}
	return fmt.Sprintf("fitting a uniform sample of %d of the %d usable rows (%s in memory of --memory %s), then scoring every row in a second read",
		n, rd.usable(), dbio.FormatSize(rd.resident()), dbio.FormatSize(rd.plan.budget))
}

// source is the fitted rows as read, before scaling.
func (rd *fitData) source() fit.Source {
	if rd.sample != nil {
		return rd.sample.x
	}
	return rd.stored.store()
}

// scaled applies the scaling to the fitted rows and returns them as the
// fit sees them, and the scoring passes over every usable row: over the
// store, or over new reads of the query in rt with the scaling applied.
func (rd *fitData) scaled(rt *readTx, sc fit.Scaling) (fit.Source, rowPasses) {
	scale := sc.Method != "none"
	if rd.sample != nil {
		x := rd.sample.x
		var scp *fit.Scaling
		if scale {
			sc.Apply(x.X, x.X)
			scp = &sc
		}
		return x, rowPasses{open: rt.feed(rd.plan.readRows, scp, nil), rows: rd.usable()}
	}
	st := rd.stored
	n := int64(st.store().Len())
	if st.mem != nil {
		if scale {
			st.mem.Transform(func(rows []float64) { sc.Apply(rows, rows) })
		}
		return st.mem, rowPasses{open: storeFeedFunc(st.mem, st.mem), rows: n}
	}
	var src fit.Source = st.spill
	if scale {
		src = &scaledSource{src: st.spill, sc: sc}
	}
	return src, rowPasses{open: storeFeedFunc(st.spill, src), rows: n}
}

// dropSample lets the sample go once the fit is done.
func (rd *fitData) dropSample() {
	if rd.sample != nil {
		rd.sample.x = &fit.Dense{D: rd.sample.x.D, N: rd.sample.x.N}
	}
}

// remove deletes the spill, if any; it is idempotent and nil-safe.
func (rd *fitData) remove() error {
	if rd == nil {
		return nil
	}
	return rd.stored.remove()
}
