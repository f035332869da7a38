package dbio

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
)

// DefaultSpillChunkRows is the number of rows in a chunk of a Spill's
// Source view when SpillConfig.ChunkRows is zero: with 8 features in
// float64 a chunk is 4 MiB, read with a few large positioned reads.
const DefaultSpillChunkRows = 65536

// spillBufSize is the size of the buffers through which a Spill writes
// each file and reads features: large enough that the system calls cost
// little, small enough that many concurrent readers cost little memory.
const spillBufSize = 256 << 10

// errSpillRemoved is the cause of an error from a Spill that was removed.
var errSpillRemoved = errors.New("spill removed")

// SpillConfig configures a Spill. The zero value spills float64 features
// to os.TempDir() with chunks of DefaultSpillChunkRows rows.
type SpillConfig struct {
	// Dir is the directory of the spill files when CreateSpill is given
	// no directory; "" means os.TempDir().
	Dir string
	// Float32 stores features as float32 instead of float64, which halves
	// the file and the time to read it. A float32 keeps about 7
	// significant decimal digits (a 24-bit significand, relative rounding
	// error at most 2⁻²⁴ ≈ 6·10⁻⁸), plenty to cluster measurements such as
	// photometric colours, but a fit on float32 rows does not reproduce a
	// fit on the float64 rows bit for bit. A feature beyond float32's range
	// (|x| > 3.4·10³⁸) is an error.
	Float32 bool
	// ChunkRows is the number of rows per chunk of the Source view; 0 means
	// DefaultSpillChunkRows.
	ChunkRows int
}

// Spill is a local copy of rows that do not fit the memory budget: each
// row's key, as the server sent it, and its d features. It is written once,
// with Append and Finish, and then read as many times as needed: the
// features through the Source view (Dim, Len, Chunks, Chunk; the method set
// fit.Source asks for), the keys with ChunkKeys. Chunk c is rows
// [c·R, min((c+1)·R, n)), where R is SpillConfig.ChunkRows and n = Len().
//
// Layout. A spill is two files in the spill directory, Path()+".features"
// and Path()+".keys", private to the process and without headers:
//
//   - features: row i's d features as little-endian IEEE 754 values of w
//     bytes (w = 8, or 4 with SpillConfig.Float32), so row i starts at byte
//     i·d·w and a chunk is one contiguous range, read with positioned reads
//     (pread) that are safe to make concurrently;
//   - keys: row i's key as its length (an unsigned varint, as
//     encoding/binary writes it) followed by its bytes. The byte offset of
//     each chunk's first key is kept in memory: 8 bytes per chunk, so memory
//     grows with the number of chunks, n/R, and not with the rows.
//
// Removal. Where the system allows it (Linux and other Unix systems), both
// files are unlinked as soon as they are created and live on through the
// descriptors the Spill holds: their space is freed when Remove closes
// them, or when the process ends, however it ends (even by SIGKILL), so a
// crash leaves nothing behind. The price is that the files do not show in
// a listing of the directory (df shows the space they take, du does not);
// Path still names them for messages. Where an open file cannot be
// unlinked (Windows), the files keep their names until Remove. Either way
// the caller defers Remove and also calls it on cancellation; Remove is
// idempotent and safe to call concurrently with anything else.
//
// Append and Finish are called from one goroutine; Chunk and ChunkKeys may
// be called concurrently with each other once Finish has returned.
type Spill struct {
	dir   string   // the spill directory
	path  string   // the files' common name, without extension
	named []string // files that could not be unlinked at creation
	d     int      // features per row
	width int      // bytes per feature: 8 or 4
	rows  int      // R, rows per chunk

	x, k   *os.File  // features and keys
	xw, kw spillFile // their write buffers

	n      int     // rows appended
	keyEnd int64   // bytes of the keys file, flushed or not
	keyOff []int64 // keyOff[c] is the offset of chunk c's first key; Finish adds keyEnd
	err    error   // sticky error of Append or Finish

	bytes atomic.Int64 // the data appended: n·d·w + keyEnd
	state atomic.Int32 // spillWriting, spillReady or spillRemoved
	mu    sync.Mutex   // serializes Remove
	pool  sync.Pool    // of *[]byte of spillBufSize, for Chunk
}

// The states of a Spill; a Spill that failed is removed.
const (
	spillWriting = iota
	spillReady
	spillRemoved
)

// CreateSpill creates an empty Spill for rows of d features in dir, or in
// cfg.Dir when dir is "", or in os.TempDir() when both are "". An error
// names the directory (one that is missing or cannot be written to).
func CreateSpill(dir string, d int, cfg SpillConfig) (*Spill, error) {
	return createSpill(dir, d, cfg, nil)
}

// createSpill is CreateSpill with a hook for tests: when wrap is not nil,
// the Spill writes each file through wrap(file).
func createSpill(dir string, d int, cfg SpillConfig, wrap func(io.Writer) io.Writer) (*Spill, error) {
	if d <= 0 {
		panic(fmt.Sprintf("dbio: spill of %d features", d))
	}
	if cfg.ChunkRows < 0 {
		panic(fmt.Sprintf("dbio: spill chunks of %d rows", cfg.ChunkRows))
	}
	dir = firstNonEmpty(dir, cfg.Dir, os.TempDir())
	s := &Spill{dir: dir, d: d, width: 8, rows: cfg.ChunkRows}
	if cfg.Float32 {
		s.width = 4
	}
	if s.rows == 0 {
		s.rows = DefaultSpillChunkRows
	}
	s.pool.New = func() any {
		b := make([]byte, spillBufSize)
		return &b
	}

	x, err := os.CreateTemp(dir, "assort-spill-*.features")
	if err != nil {
		return nil, fmt.Errorf("create spill in directory %q: %w", dir, err)
	}
	s.path = strings.TrimSuffix(x.Name(), ".features")
	k, err := os.OpenFile(s.path+".keys", os.O_RDWR|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		err = fmt.Errorf("create spill in directory %q: %w", dir, err)
		return nil, errors.Join(err, x.Close(), os.Remove(x.Name()))
	}
	s.x, s.k = x, k
	for _, f := range []*os.File{x, k} {
		if os.Remove(f.Name()) != nil {
			s.named = append(s.named, f.Name())
		}
	}
	s.xw = spillFile{w: x, buf: make([]byte, 0, spillBufSize)}
	s.kw = spillFile{w: k, buf: make([]byte, 0, spillBufSize)}
	if wrap != nil {
		s.xw.w, s.kw.w = wrap(x), wrap(k)
	}
	return s, nil
}

// firstNonEmpty returns the first of its arguments that is not "".
func firstNonEmpty(s ...string) string {
	for _, v := range s {
		if v != "" {
			return v
		}
	}
	return ""
}

// Append writes the N rows of c, keys and features, after those appended
// before. Any error is final: the spill is removed, and Append and Finish
// return the error from then on. A full disk gives an error that says so,
// names the directory and how many bytes reached it, and wraps
// syscall.ENOSPC. With SpillConfig.Float32, a feature beyond float32's
// range is an error naming the row (numbered from c.First + 1, as in
// RowError) and the feature (from 1).
func (s *Spill) Append(c *Chunk) error {
	if c.D != s.d || len(c.X) != c.N*c.D || c.Keys.Len() != c.N {
		panic(fmt.Sprintf("dbio: Spill.Append of a chunk of %d rows, %d features, %d values and %d keys to a spill of %d features",
			c.N, c.D, len(c.X), c.Keys.Len(), s.d))
	}
	if err := s.writable("append to spill"); err != nil {
		return err
	}
	for i := range c.N {
		if s.n%s.rows == 0 {
			s.keyOff = append(s.keyOff, s.keyEnd)
		}
		key := c.Keys.At(i)
		s.kw.buf = binary.AppendUvarint(s.kw.buf, uint64(len(key)))
		if err := s.kw.write(key); err != nil {
			return s.fail("append to spill", err)
		}
		s.keyEnd += int64(uvarintLen(uint64(len(key))) + len(key))

		row := c.X[i*s.d : (i+1)*s.d]
		if s.width == 8 {
			for _, v := range row {
				s.xw.buf = binary.LittleEndian.AppendUint64(s.xw.buf, math.Float64bits(v))
			}
		} else {
			for j, v := range row {
				if math.Abs(v) > math.MaxFloat32 {
					return s.fail("append to spill", fmt.Errorf("row %d, feature %d: %g is beyond float32's range (±%g); spill float64 instead",
						c.First+int64(i)+1, j+1, v, math.MaxFloat32))
				}
				s.xw.buf = binary.LittleEndian.AppendUint32(s.xw.buf, math.Float32bits(float32(v)))
			}
		}
		if err := s.xw.write(nil); err != nil {
			return s.fail("append to spill", err)
		}
		s.n++
	}
	s.bytes.Store(int64(s.n)*int64(s.d*s.width) + s.keyEnd)
	return nil
}

// Finish writes out what Append buffered; then the Source view and
// ChunkKeys may be used. A second call does nothing. Finish fails like
// Append, and after a failed Append returns its error.
func (s *Spill) Finish() error {
	if s.state.Load() == spillReady {
		return nil
	}
	if err := s.writable("finish spill"); err != nil {
		return err
	}
	if err := s.xw.flush(); err != nil {
		return s.fail("finish spill", err)
	}
	if err := s.kw.flush(); err != nil {
		return s.fail("finish spill", err)
	}
	s.keyOff = append(s.keyOff, s.keyEnd)
	s.xw.buf, s.kw.buf = nil, nil
	s.state.Store(spillReady)
	return nil
}

// writable returns the error that stops step from writing, if any.
func (s *Spill) writable(step string) error {
	switch {
	case s.err != nil:
		return s.err
	case s.state.Load() == spillRemoved:
		return fmt.Errorf("%s %s: %w", step, s.path, errSpillRemoved)
	case s.state.Load() == spillReady:
		panic("dbio: Spill written to after Finish")
	}
	return nil
}

// fail records err, the failure of step, removes the spill and returns the
// error.
func (s *Spill) fail(step string, err error) error {
	if errors.Is(err, syscall.ENOSPC) {
		n := s.xw.written + s.kw.written
		err = fmt.Errorf("%s: spill disk full in directory %q after %d bytes (%s) were written: %w",
			step, s.dir, n, FormatSize(n), err)
	} else {
		err = fmt.Errorf("%s: %w", step, err)
	}
	s.err = errors.Join(err, s.Remove())
	return s.err
}

// Remove closes the spill's files and deletes them. It is idempotent and
// may be called at any time, from any goroutine, also while other calls
// are in progress; those then fail with an error.
func (s *Spill) Remove() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.state.Load() == spillRemoved {
		return nil
	}
	s.state.Store(spillRemoved)
	var errs []error
	for _, f := range []*os.File{s.x, s.k} {
		if err := f.Close(); err != nil {
			errs = append(errs, err)
		}
	}
	for _, name := range s.named {
		if err := os.Remove(name); err != nil {
			errs = append(errs, err)
		}
	}
	if err := errors.Join(errs...); err != nil {
		return fmt.Errorf("remove spill %s: %w", s.path, err)
	}
	return nil
}

// Path is the spill files' directory and common name, without the
// extensions ".features" and ".keys"; see Spill on why the files may not
// be found under it.
func (s *Spill) Path() string { return s.path }

// Bytes is the size of the data appended so far, in both files: n·d·w bytes
// of features and, per key, its length and bytes.
func (s *Spill) Bytes() int64 { return s.bytes.Load() }

// Dim is d, the number of features per row.
func (s *Spill) Dim() int { return s.d }

// Len is n, the number of rows appended.
func (s *Spill) Len() int { return s.n }

// Chunks is the number of chunks of the Source view, ⌈n/R⌉.
func (s *Spill) Chunks() int { return (s.n + s.rows - 1) / s.rows }

// Chunk returns the features of chunk c, row-major, and the index of its
// first row, c·R. It stores them in buf when its capacity suffices, and
// otherwise in a new slice with room for a whole chunk; the result is valid
// until the next call with the same buf. Chunk may be called concurrently.
// It panics before Finish or when c is out of range, and returns an error
// after Remove.
func (s *Spill) Chunk(c int, buf []float64) ([]float64, int, error) {
	first, n, err := s.readable(c)
	if err != nil {
		return nil, 0, fmt.Errorf("read spill chunk %d: %w", c, err)
	}
	need := n * s.d
	if cap(buf) < need {
		buf = make([]float64, 0, min(s.rows, s.n)*s.d)
	}
	out := buf[:need]

	scratch := s.pool.Get().(*[]byte)
	defer s.pool.Put(scratch)
	off := int64(first) * int64(s.d*s.width)
	for done := 0; done < need; {
		m := min(need-done, len(*scratch)/s.width)
		b := (*scratch)[:m*s.width]
		if _, err := s.x.ReadAt(b, off); err != nil {
			return nil, 0, fmt.Errorf("read spill chunk %d: %w", c, err)
		}
		decodeFeatures(out[done:done+m], b, s.width)
		off += int64(len(b))
		done += m
	}
	return out, first, nil
}

// ChunkKeys appends the keys of chunk c's rows, in order, to dst; on error
// dst is left as it was. It may be called concurrently with Chunk and
// itself (with different dst), and panics like Chunk.
func (s *Spill) ChunkKeys(c int, dst *Keys) error {
	_, n, err := s.readable(c)
	if err != nil {
		return fmt.Errorf("read keys of spill chunk %d: %w", c, err)
	}
	lo, hi := s.keyOff[c], s.keyOff[c+1]
	// Read the chunk's keys into the end of dst.Data and move each key
	// over its length prefix, from the front: a key never moves right.
	start, ends := len(dst.Data), len(dst.End)
	end := start + int(hi-lo)
	dst.Data = slices.Grow(dst.Data, end-start)[:end]
	if _, err := s.k.ReadAt(dst.Data[start:], lo); err != nil {
		dst.Data = dst.Data[:start]
		return fmt.Errorf("read keys of spill chunk %d: %w", c, err)
	}
	w, r := start, start
	for range n {
		l, m := binary.Uvarint(dst.Data[r:end])
		if m <= 0 || l > uint64(end-r-m) {
			dst.Data, dst.End = dst.Data[:start], dst.End[:ends]
			return fmt.Errorf("read keys of spill chunk %d: malformed key length at byte %d of %s.keys", c, lo+int64(r-start), s.path)
		}
		r += m
		w += copy(dst.Data[w:], dst.Data[r:r+int(l)])
		r += int(l)
		dst.End = append(dst.End, w)
	}
	if r != end {
		dst.Data, dst.End = dst.Data[:start], dst.End[:ends]
		return fmt.Errorf("read keys of spill chunk %d: %d bytes after the last key in %s.keys", c, end-r, s.path)
	}
	dst.Data = dst.Data[:w]
	return nil
}

// readable checks that chunk c may be read and returns its first row and
// number of rows.
func (s *Spill) readable(c int) (first, n int, err error) {
	switch s.state.Load() {
	case spillWriting:
		panic("dbio: Spill read before Finish")
	case spillRemoved:
		return 0, 0, errSpillRemoved
	}
	if c < 0 || c >= s.Chunks() {
		panic(fmt.Sprintf("dbio: spill chunk %d out of range [0, %d)", c, s.Chunks()))
	}
	first = c * s.rows
	return first, min(s.rows, s.n-first), nil
}

// decodeFeatures sets dst from the little-endian values of width bytes in
// b, which holds len(dst) of them.
func decodeFeatures(dst []float64, b []byte, width int) {
	if width == 8 {
		for i := range dst {
			dst[i] = math.Float64frombits(binary.LittleEndian.Uint64(b[:8:8]))
			b = b[8:]
		}
		return
	}
	for i := range dst {
		dst[i] = float64(math.Float32frombits(binary.LittleEndian.Uint32(b[:4:4])))
		b = b[4:]
	}
}

// spillFile is a write buffer in front of one of a Spill's files.
type spillFile struct {
	w       io.Writer // the file, or a test's wrapper of it
	buf     []byte    // data not yet written, up to about spillBufSize bytes
	written int64     // bytes the file accepted
}

// write appends b to the buffer and writes the buffer out once it holds
// spillBufSize bytes; a b of that size or more is written directly.
func (f *spillFile) write(b []byte) error {
	if len(b) >= spillBufSize {
		if err := f.flush(); err != nil {
			return err
		}
		return f.put(b)
	}
	f.buf = append(f.buf, b...)
	if len(f.buf) >= spillBufSize {
		return f.flush()
	}
	return nil
}

// flush writes out the buffer.
func (f *spillFile) flush() error {
	err := f.put(f.buf)
	f.buf = f.buf[:0]
	return err
}

// put writes b to the file, counting the bytes that reach it.
func (f *spillFile) put(b []byte) error {
	if len(b) == 0 {
		return nil
	}
	n, err := f.w.Write(b)
	f.written += int64(n)
	if err == nil && n < len(b) {
		err = io.ErrShortWrite
	}
	return err
}

// uvarintLen is the length of x written by binary.AppendUvarint.
func uvarintLen(x uint64) int {
	n := 1
	for ; x >= 0x80; x >>= 7 {
		n++
	}
	return n
}
