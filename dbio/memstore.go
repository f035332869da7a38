package dbio

import "fmt"

// MemStoreConfig configures a MemStore. The zero value keeps chunks of
// DefaultSpillChunkRows rows, as a Spill with a zero SpillConfig does.
type MemStoreConfig struct {
	// ChunkRows is the number of rows per chunk of the Source view; 0
	// means DefaultSpillChunkRows.
	ChunkRows int
}

// MemStore keeps rows in memory: each row's key, as the server sent it,
// and its d features as float64. It is the in-memory counterpart of a
// Spill, with the same view: the features through Dim, Len, Chunks and
// Chunk (the method set fit.Source asks for), the keys with ChunkKeys.
//
// Chunks. Rows are copied into chunks of R rows (MemStoreConfig.ChunkRows),
// so chunk c is rows [c·R, min((c+1)·R, n)) however Append was called: a
// MemStore and a Spill of the same R, given the same rows, have the same
// chunk boundaries, and a computation that works chunk by chunk gives the
// same result on either.
//
// Memory. A chunk's features are one slice of R·d values, allocated whole
// when its first row arrives; its keys are one byte slice, sized from the
// keys of the chunk that starts it and trimmed when the chunk is full, and
// one int per row for the keys' ends. Bytes reports what is allocated, so
// that a caller can hold the store to a budget; besides it a MemStore costs
// a few dozen bytes per chunk.
//
// Append, Transform and Drain are called from one goroutine; Chunk and
// ChunkKeys may be called concurrently with each other once the appends
// are done.
type MemStore struct {
	d      int
	rows   int // R, rows per chunk
	chunks []memChunk
	n      int
	bytes  int64
}

// memChunk is one chunk of a MemStore.
type memChunk struct {
	keys Keys
	x    []float64 // up to R rows, row-major, with capacity R·d
}

// bytes is what the chunk has allocated.
func (c *memChunk) bytes() int64 {
	return int64(cap(c.x))*8 + int64(cap(c.keys.Data)) + int64(cap(c.keys.End))*intBytes
}

// intBytes is the size of an int.
const intBytes = 4 << (^uint(0) >> 63)

// NewMemStore returns an empty MemStore for rows of d features. It panics
// unless d ≥ 1 and cfg.ChunkRows ≥ 0.
func NewMemStore(d int, cfg MemStoreConfig) *MemStore {
	if d <= 0 {
		panic(fmt.Sprintf("dbio: memory store of %d features", d))
	}
	if cfg.ChunkRows < 0 {
		panic(fmt.Sprintf("dbio: memory store chunks of %d rows", cfg.ChunkRows))
	}
	m := &MemStore{d: d, rows: cfg.ChunkRows}
	if m.rows == 0 {
		m.rows = DefaultSpillChunkRows
	}
	return m
}

// Append copies the N rows of c, keys and features, after those appended
// before. c is not retained. It panics when c's shape does not match the
// store's.
func (m *MemStore) Append(c *Chunk) {
	d := m.d
	if c.D != d || len(c.X) != c.N*c.D || c.Keys.Len() != c.N {
		panic(fmt.Sprintf("dbio: MemStore.Append of a chunk of %d rows, %d features, %d values and %d keys to a store of %d features",
			c.N, c.D, len(c.X), c.Keys.Len(), d))
	}
	for i := 0; i < c.N; {
		if m.n%m.rows == 0 {
			// A new chunk: room for R rows of features and, guessed from
			// the incoming keys, of key bytes.
			perKey := 8
			if c.N > 0 {
				perKey = (len(c.Keys.Data) + c.N - 1) / c.N
			}
			m.chunks = append(m.chunks, memChunk{
				x:    make([]float64, 0, m.rows*d),
				keys: Keys{Data: make([]byte, 0, m.rows*perKey), End: make([]int, 0, m.rows)},
			})
			m.bytes += m.chunks[len(m.chunks)-1].bytes()
		}
		last := &m.chunks[len(m.chunks)-1]
		before := last.bytes()
		take := min(c.N-i, m.rows-last.keys.Len())
		last.x = append(last.x, c.X[i*d:(i+take)*d]...)
		for j := i; j < i+take; j++ {
			last.keys.Append(c.Keys.At(j))
		}
		if last.keys.Len() == m.rows && cap(last.keys.Data) > len(last.keys.Data)+len(last.keys.Data)/8 {
			// The guess was too generous or growth overshot: trim.
			last.keys.Data = append(make([]byte, 0, len(last.keys.Data)), last.keys.Data...)
		}
		m.bytes += last.bytes() - before
		m.n += take
		i += take
	}
}

// Bytes is the memory the stored rows take: features, key bytes and key
// ends, as allocated.
func (m *MemStore) Bytes() int64 { return m.bytes }

// Dim is d, the number of features per row.
func (m *MemStore) Dim() int { return m.d }

// Len is n, the number of rows appended.
func (m *MemStore) Len() int { return m.n }

// Chunks is the number of chunks, ⌈n/R⌉.
func (m *MemStore) Chunks() int { return len(m.chunks) }

// ChunkRows is R, the number of rows per chunk (the last may have fewer).
func (m *MemStore) ChunkRows() int { return m.rows }

// Chunk returns the features of chunk c, row-major, and the index of its
// first row, c·R. The result is the store's own memory, not a copy: the
// caller must not modify it (Transform does that). buf is not used; the
// parameter is there for the Source view. It panics when c is out of
// range.
func (m *MemStore) Chunk(c int, buf []float64) ([]float64, int, error) {
	m.check(c)
	return m.chunks[c].x, c * m.rows, nil
}

// ChunkKeys appends the keys of chunk c's rows, in order, to dst. It
// never fails; the error is there for the view a Spill shares. It panics
// when c is out of range.
func (m *MemStore) ChunkKeys(c int, dst *Keys) error {
	m.check(c)
	k := &m.chunks[c].keys
	base := len(dst.Data)
	dst.Data = append(dst.Data, k.Data...)
	for _, e := range k.End {
		dst.End = append(dst.End, base+e)
	}
	return nil
}

func (m *MemStore) check(c int) {
	if c < 0 || c >= len(m.chunks) {
		panic(fmt.Sprintf("dbio: memory store chunk %d out of range [0, %d)", c, len(m.chunks)))
	}
}

// Transform calls fn on the features of every chunk in turn, row-major,
// for fn to change in place (to scale them, say).
func (m *MemStore) Transform(fn func(rows []float64)) {
	for i := range m.chunks {
		fn(m.chunks[i].x)
	}
}

// Drain hands every chunk, in order, to to (Spill.Append, say) as a Chunk
// whose First is the chunk's first row, and frees it once to returns, so
// that moving the rows elsewhere never holds them twice. The store is
// empty afterwards, also when to fails; Drain then returns to's error.
func (m *MemStore) Drain(to func(c *Chunk) error) error {
	defer func() {
		m.chunks, m.n, m.bytes = nil, 0, 0
	}()
	for i := range m.chunks {
		mc := &m.chunks[i]
		c := &Chunk{N: mc.keys.Len(), D: m.d, Keys: mc.keys, X: mc.x, First: int64(i) * int64(m.rows)}
		if err := to(c); err != nil {
			return err
		}
		m.chunks[i] = memChunk{}
	}
	return nil
}
