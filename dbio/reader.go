package dbio

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"

	"github.com/jackc/pgx/v5/pgconn"
)

// DefaultChunkRows is the number of rows in a Chunk when
// ReaderConfig.ChunkRows is zero. At 65536 rows a chunk of 8 features is
// 4 MiB of float64: large enough that the per-chunk work of a consumer
// (handing the chunk to workers, one pass of bookkeeping) is negligible
// next to the rows, small enough that a chunk and its keys stay a fixed,
// modest amount of memory however many rows the query returns.
const DefaultChunkRows = 65536

// Missing says what a Reader does with a row whose feature is NULL, NaN or
// infinite.
type Missing int

const (
	// MissingFail stops reading with a *RowError.
	MissingFail Missing = iota
	// MissingSkip drops the row and counts it in RowsSkipped.
	MissingSkip
)

// ReaderConfig adjusts a Reader; the zero value is usable.
type ReaderConfig struct {
	// ChunkRows is the number of rows per chunk; zero means
	// DefaultChunkRows.
	ChunkRows int
	// Missing is what to do with a NULL, NaN or infinite feature. A NULL
	// key is an error either way.
	Missing Missing
	// KeyType is the key's type OID, so that errors can show the key's
	// value (see RenderKey); zero shows it in hexadecimal.
	KeyType uint32
	// KeyName and Features name the key and the d features, for error
	// messages. Features is either empty (columns are then called by
	// their position, "feature 3") or has d names.
	KeyName  string
	Features []string
}

// Chunk is a block of consecutive rows that passed validation.
type Chunk struct {
	// N is the number of rows, D the number of features.
	N, D int
	// Keys holds the N keys in the server's binary format for their type.
	Keys Keys
	// X holds the features, N×D row-major: feature j of row i is X[i*D+j].
	X []float64
	// First is the 0-based index of the chunk's first row among the rows
	// delivered so far, so that row i of the chunk is row First+i of the
	// data. Without skipped rows it is also the index among rows read.
	First int64
}

// Reader reads the result of a binary COPY made by CopySQL as Chunks, in
// the manner of bufio.Scanner:
//
//	r := NewReader(ctx, conn, copySQL, d, cfg)
//	defer r.Close()
//	for r.Next() {
//		c := r.Chunk()
//		...
//	}
//	if err := r.Err(); err != nil { ... }
//
// The COPY runs on its own goroutine, which gathers the server's messages
// into large buffers; Next decodes them, with no allocation per row.
type Reader struct {
	ctx  context.Context
	conn *pgconn.PgConn
	sql  string
	d    int
	cfg  ReaderConfig

	pipe *copyOutPipe
	dec  *Decoder
	done chan struct{} // closed when the COPY has returned
	tag  pgconn.CommandTag
	cerr error // the COPY's error; read only after done is closed

	chunk   Chunk
	fields  [][]byte
	chunks  int
	read    int64
	skipped int64
	kept    int64
	err     error
	eof     bool
	closed  bool
}

// NewReader starts copySQL, a `COPY ... TO STDOUT (FORMAT binary)` whose
// rows are a key and d float8 features (as CopySQL makes), on conn and
// returns a Reader over its result. conn is busy until the Reader is
// closed. The caller opens the READ ONLY transaction the COPY runs in; the
// Reader does not begin one.
//
// ctx governs the whole read: when it is cancelled the connection is
// closed (pgconn's behaviour) and Next fails.
func NewReader(ctx context.Context, conn *pgconn.PgConn, copySQL string, d int, cfg ReaderConfig) *Reader {
	if d < 1 {
		panic(fmt.Sprintf("dbio: NewReader with %d features", d))
	}
	if len(cfg.Features) != 0 && len(cfg.Features) != d {
		panic(fmt.Sprintf("dbio: NewReader with %d features and %d feature names", d, len(cfg.Features)))
	}
	if cfg.ChunkRows < 0 {
		panic(fmt.Sprintf("dbio: ReaderConfig.ChunkRows is %d", cfg.ChunkRows))
	}
	if cfg.ChunkRows == 0 {
		cfg.ChunkRows = DefaultChunkRows
	}
	r := &Reader{
		ctx:  ctx,
		conn: conn,
		sql:  copySQL,
		d:    d,
		cfg:  cfg,
		pipe: newCopyOutPipe(),
		done: make(chan struct{}),
	}
	r.dec = NewDecoder(r.pipe, DecoderConfig{})
	r.chunk.D = d
	go func() {
		defer close(r.done)
		r.tag, r.cerr = conn.CopyTo(ctx, r.pipe, copySQL)
		r.pipe.closeWrite(r.cerr)
	}()
	return r
}

// Next reads the next chunk and reports whether there is one. It returns
// false at the end of the data or on an error, which Err then returns.
func (r *Reader) Next() bool {
	if r.err != nil || r.eof || r.closed {
		return false
	}
	r.chunks++
	c := &r.chunk
	c.N = 0
	c.First = r.kept
	c.Keys.Reset()
	if c.X == nil {
		c.X = make([]float64, 0, r.cfg.ChunkRows*r.d)
		c.Keys.Data = make([]byte, 0, r.cfg.ChunkRows*8)
		c.Keys.End = make([]int, 0, r.cfg.ChunkRows)
	}
	c.X = c.X[:0]
	d := r.d
	for c.N < r.cfg.ChunkRows {
		base := len(c.X)
		row := c.X[base : base+d]
		if key, ok := r.dec.float8Row(row); ok {
			r.read++
			c.X = c.X[:base+d]
			c.Keys.Append(key)
			c.N++
			continue
		}
		fields, err := r.dec.Next(r.fields)
		r.fields = fields
		if err == io.EOF {
			r.eof = true
			r.finish()
			break
		}
		if err != nil {
			r.fail(r.copyError(err))
			return false
		}
		r.read++
		if len(fields) != d+1 {
			r.fail(&RowError{Row: r.read, Err: fmt.Errorf("%w: %d, want %d", ErrFieldRows, len(fields), d+1)})
			return false
		}
		key := fields[0]
		if key == nil {
			r.fail(&RowError{Row: r.read, Column: r.cfg.KeyName, Err: ErrNullKey})
			return false
		}
		ok := true
		for j, f := range fields[1:] {
			if len(f) != 8 {
				ok = false
				break
			}
			v := math.Float64frombits(binary.BigEndian.Uint64(f))
			row[j] = v
			if v-v != 0 { // NaN or ±Inf
				ok = false
				break
			}
		}
		if !ok {
			j, cause := badFeature(fields[1:])
			if r.cfg.Missing == MissingSkip && cause != nil && !errors.Is(cause, ErrBadValue) {
				r.skipped++
				continue
			}
			r.fail(&RowError{Row: r.read, Key: RenderKey(r.cfg.KeyType, key), Column: r.featureName(j), Err: cause})
			return false
		}
		c.X = c.X[:base+d]
		c.Keys.Append(key)
		c.N++
	}
	if r.err != nil {
		return false
	}
	r.kept += int64(c.N)
	return c.N > 0
}

// badFeature finds the first feature that is not a finite float8 and says
// why.
func badFeature(fs [][]byte) (int, error) {
	for j, f := range fs {
		switch {
		case f == nil:
			return j, ErrNull
		case len(f) != 8:
			return j, fmt.Errorf("%w: %d bytes", ErrBadValue, len(f))
		}
		v := math.Float64frombits(binary.BigEndian.Uint64(f))
		switch {
		case math.IsNaN(v):
			return j, ErrNaN
		case math.IsInf(v, 0):
			return j, ErrInf
		}
	}
	return 0, nil
}

func (r *Reader) featureName(j int) string {
	if len(r.cfg.Features) == r.d {
		return r.cfg.Features[j]
	}
	return fmt.Sprintf("feature %d", j+1)
}

// finish checks the end of a complete stream against the server's count.
func (r *Reader) finish() {
	<-r.done
	if r.cerr != nil {
		r.fail(fmt.Errorf("copy out: %w", queryError(r.sql, r.cerr)))
		return
	}
	if n := r.tag.RowsAffected(); n != r.read {
		r.fail(fmt.Errorf("copy out: the server sent %d rows and reports %d", r.read, n))
	}
}

// copyError turns a decoding error into the COPY's own error when the
// stream ended because the COPY failed.
func (r *Reader) copyError(err error) error {
	var cf *copyFailed
	if errors.As(err, &cf) {
		return fmt.Errorf("copy out: %w", queryError(r.sql, cf.err))
	}
	return err
}

func (r *Reader) fail(err error) {
	r.err = fmt.Errorf("read chunk %d: %w", r.chunks, err)
}

// Chunk returns the current chunk. It is valid until the next call to
// Next; the Reader reuses its storage.
func (r *Reader) Chunk() *Chunk { return &r.chunk }

// Err returns the error that stopped Next, or nil at a clean end.
func (r *Reader) Err() error { return r.err }

// RowsRead is the number of rows read from the server so far, skipped
// ones included.
func (r *Reader) RowsRead() int64 { return r.read }

// RowsSkipped is the number of rows dropped under MissingSkip.
func (r *Reader) RowsSkipped() int64 { return r.skipped }

// Close ends the read and returns once the connection is free again. If
// the COPY is still running, Close asks the server to cancel it (the
// PostgreSQL protocol has no other way to end a COPY TO early) and
// discards what is still in flight. A cancelled COPY aborts the
// transaction it runs in, which the caller then rolls back; the connection
// itself stays usable. Close returns an error only when the connection was
// lost. It is safe to call more than once.
func (r *Reader) Close() error {
	if !r.closed {
		r.closed = true
		r.pipe.abandon()
		select {
		case <-r.done:
		default:
			if r.ctx.Err() == nil {
				// An error here means the request did not reach the
				// server; the COPY then runs to its end, discarded.
				_ = r.conn.CancelRequest(r.ctx)
			}
			<-r.done
		}
	}
	if r.conn.IsClosed() {
		return fmt.Errorf("close reader: connection lost: %w", r.cerr)
	}
	return nil
}

// copyFailed carries the COPY's error through the pipe to the decoder and
// back, so that the Reader reports it rather than a truncated stream.
type copyFailed struct{ err error }

func (e *copyFailed) Error() string { return e.err.Error() }
func (e *copyFailed) Unwrap() error { return e.err }

// Buffers of the pipe between the COPY and the decoder. The server sends
// one protocol message per row, about a hundred bytes for a few features;
// gathering them into large buffers makes the hand-over between
// goroutines rare.
const (
	pipeBufSize = 256 << 10
	pipeBuffers = 4
)

// copyOutPipe carries the COPY data from pgconn's CopyTo (an io.Writer
// called once per protocol message) to the Decoder (an io.Reader) in large
// buffers. Once the reading side abandons it, writes are discarded so that
// the COPY can run to its end or to its cancellation without blocking.
type copyOutPipe struct {
	full chan []byte
	free chan []byte
	stop chan struct{}

	// Writer side.
	cur     []byte
	stopped bool
	err     error // the COPY's error; written before full is closed

	// Reader side.
	rd   []byte // unread part of held
	held []byte
}

func newCopyOutPipe() *copyOutPipe {
	p := &copyOutPipe{
		full: make(chan []byte, pipeBuffers),
		free: make(chan []byte, pipeBuffers),
		stop: make(chan struct{}),
	}
	for range pipeBuffers {
		p.free <- make([]byte, 0, pipeBufSize)
	}
	return p
}

// Write appends b to the current buffer, handing buffers over as they
// fill.
func (p *copyOutPipe) Write(b []byte) (int, error) {
	n := len(b)
	for len(b) > 0 && !p.stopped {
		if p.cur == nil {
			select {
			case p.cur = <-p.free:
			case <-p.stop:
				p.stopped = true
				return n, nil
			}
		}
		k := copy(p.cur[len(p.cur):cap(p.cur)], b)
		p.cur = p.cur[:len(p.cur)+k]
		b = b[k:]
		if len(p.cur) == cap(p.cur) {
			p.send()
		}
	}
	return n, nil
}

func (p *copyOutPipe) send() {
	select {
	case p.full <- p.cur:
	case <-p.stop:
		p.stopped = true
	}
	p.cur = nil
}

// closeWrite hands over the last buffer and ends the data with err (nil
// for a clean end).
func (p *copyOutPipe) closeWrite(err error) {
	if len(p.cur) > 0 && !p.stopped {
		p.send()
	}
	if err != nil {
		p.err = &copyFailed{err}
	}
	close(p.full)
}

// Read implements io.Reader for the Decoder.
func (p *copyOutPipe) Read(b []byte) (int, error) {
	for len(p.rd) == 0 {
		if p.held != nil {
			p.free <- p.held[:0] // never blocks: there are only pipeBuffers buffers
			p.held = nil
		}
		buf, ok := <-p.full
		if !ok {
			if p.err != nil {
				return 0, p.err
			}
			return 0, io.EOF
		}
		p.held, p.rd = buf, buf
	}
	n := copy(b, p.rd)
	p.rd = p.rd[n:]
	return n, nil
}

// abandon tells the writer side to discard the rest.
func (p *copyOutPipe) abandon() { close(p.stop) }
