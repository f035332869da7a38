package fit

import "fmt"

// DefaultChunkRows is the number of rows in a chunk of a Dense when
// ChunkRows is zero. It is small enough that a chunk of 8 features fits in a
// core's L2 cache and large enough that per-chunk overhead is negligible.
const DefaultChunkRows = 4096

// Source is a read-only table of n rows of d features, split into chunks
// that are the same on every pass. Implementations must be safe for
// concurrent calls to Chunk.
type Source interface {
	// Dim is d, the number of features.
	Dim() int
	// Len is n, the number of rows.
	Len() int
	// Chunks is the number of chunks.
	Chunks() int
	// Chunk returns the rows of chunk c, row-major, and the index of its
	// first row. buf may be used as storage; the result is valid until the
	// next call with the same buf.
	Chunk(c int, buf []float64) (rows []float64, first int, err error)
}

// Dense is an in-memory Source: N rows of D features, row-major in X.
type Dense struct {
	N, D int
	X    []float64
	// ChunkRows is the number of rows per chunk; zero means
	// DefaultChunkRows.
	ChunkRows int
}

// NewDense returns a Dense over x, which must hold a whole number of rows
// of d features.
func NewDense(x []float64, d int) *Dense {
	if d <= 0 || len(x)%d != 0 {
		panic(fmt.Sprintf("fit: %d values do not make rows of %d features", len(x), d))
	}
	return &Dense{N: len(x) / d, D: d, X: x}
}

// Row returns row i without copying.
func (m *Dense) Row(i int) []float64 { return m.X[i*m.D : (i+1)*m.D] }

func (m *Dense) Dim() int { return m.D }
func (m *Dense) Len() int { return m.N }

func (m *Dense) chunkRows() int {
	if m.ChunkRows > 0 {
		return m.ChunkRows
	}
	return DefaultChunkRows
}

func (m *Dense) Chunks() int {
	c := m.chunkRows()
	return (m.N + c - 1) / c
}

func (m *Dense) Chunk(c int, _ []float64) ([]float64, int, error) {
	size := m.chunkRows()
	lo := c * size
	hi := min(lo+size, m.N)
	if c < 0 || lo >= m.N {
		panic(fmt.Sprintf("fit: chunk %d out of range [0, %d)", c, m.Chunks()))
	}
	return m.X[lo*m.D : hi*m.D], lo, nil
}

// Progress reports the state of a fit after an iteration: the 0-based
// restart, the 1-based iteration within it, and the objective (k-means:
// inertia; mixtures: total log-likelihood), NaN when not known. It is
// called on the fitting goroutine between passes and must return quickly.
type Progress func(restart, iteration int, objective float64)
