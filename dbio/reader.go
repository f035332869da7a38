package dbio

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"sync"
	"time"

	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgproto3"
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
// Next receives the server's messages itself, on the caller's goroutine,
// copies their data once into the Decoder's buffer and decodes it there,
// with no allocation per row.
type Reader struct {
	conn *pgconn.PgConn
	d    int
	cfg  ReaderConfig

	out *copyOut
	dec *Decoder

	chunk   Chunk
	fields  [][]byte
	chunks  int
	read    int64
	skipped int64
	err     error
	eof     bool
	closed  bool
}

// NewReader starts copySQL, a `COPY ... TO STDOUT (FORMAT binary)` whose
// rows are a key and d float8 features (as CopySQL makes), on conn and
// returns a Reader over its result. The caller opens the READ ONLY
// transaction the COPY runs in; the Reader does not begin one.
//
// conn belongs to the Reader until Close: pgconn does not know that a
// COPY is running on it, so any other use of conn (or of the pgx.Conn or
// transaction it belongs to) in between would read the COPY's messages.
//
// ctx governs the whole read: when it is cancelled the connection is
// closed (as pgconn does for its own calls) and Next fails with ctx's
// error.
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
		conn: conn,
		d:    d,
		cfg:  cfg,
		out:  startCopyOut(ctx, conn, copySQL),
	}
	r.dec = NewDecoder(r.out, DecoderConfig{})
	r.chunk.D = d
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
	c.First = r.read - r.skipped // rows delivered so far
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
	if n := r.out.tag.RowsAffected(); n != r.read {
		r.fail(fmt.Errorf("copy out: the server sent %d rows and reports %d", r.read, n))
	}
}

// copyError turns a decoding error into the COPY's own error when the
// COPY failed: the data then ends early or, for a statement that is not a
// binary COPY, is not what the Decoder expects.
func (r *Reader) copyError(err error) error {
	var cf *copyFailed
	if !errors.As(r.out.err, &cf) && !errors.As(err, &cf) {
		return err
	}
	return fmt.Errorf("copy out: %w", queryError(r.out.sql, cf.err))
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
		r.out.abort()
	}
	if r.conn.IsClosed() {
		return fmt.Errorf("close reader: connection lost: %w", r.out.lostErr)
	}
	return nil
}

// copyFailed carries the COPY's error through the Decoder, so that the
// Reader reports it rather than a truncated stream.
type copyFailed struct{ err error }

func (e *copyFailed) Error() string { return e.err.Error() }
func (e *copyFailed) Unwrap() error { return e.err }

// copyOut runs a COPY TO STDOUT on a connection and serves the data of
// its CopyData messages as an io.Reader, receiving the messages on the
// reading goroutine with pgconn's ReceiveMessage. The protocol (PostgreSQL
// documentation, "Message Flow", "COPY Operations"): the Query, then
// CopyOutResponse, CopyData..., CopyDone, CommandComplete and
// ReadyForQuery, or an ErrorResponse and ReadyForQuery at any point;
// notices and parameter reports may come in between.
//
// The context is watched once for the whole COPY rather than on every
// message: on cancellation the connection's deadline is set to now, the
// read under way fails, and the connection is closed.
type copyOut struct {
	ctx  context.Context
	conn *pgconn.PgConn
	sql  string

	rest    []byte // unread data of the last CopyData message
	started bool   // CopyOutResponse received
	ended   bool   // ReadyForQuery received, or the connection lost
	tag     pgconn.CommandTag
	failure error // the server's error, or a misuse found here
	err     error // what Read returns once rest is empty: io.EOF or a *copyFailed
	lostErr error // why the connection was lost

	stopWatch func() bool   // stops the context watch
	watchDone chan struct{} // closed once a fired watch has set the deadline
}

func startCopyOut(ctx context.Context, conn *pgconn.PgConn, sql string) *copyOut {
	o := &copyOut{ctx: ctx, conn: conn, sql: sql, watchDone: make(chan struct{})}
	switch {
	case ctx.Err() != nil:
		o.ended = true
		o.err = &copyFailed{ctx.Err()}
		return o
	case conn.IsClosed():
		o.ended = true
		o.lostErr = errors.New("connection closed")
		o.err = &copyFailed{o.lostErr}
		return o
	case conn.IsBusy():
		o.ended = true
		o.err = &copyFailed{errors.New("connection busy")}
		return o
	}
	o.stopWatch = context.AfterFunc(ctx, func() {
		defer close(o.watchDone)
		_ = conn.Conn().SetDeadline(time.Now()) // an error means the connection is gone anyway
	})
	conn.Frontend().SendQuery(&pgproto3.Query{String: sql})
	if err := conn.Frontend().Flush(); err != nil {
		o.lose(fmt.Errorf("send query: %w", err))
	}
	return o
}

// Read copies the COPY's data into p, receiving messages as needed. It
// returns early, rather than wait for the network, once it has some data.
func (o *copyOut) Read(p []byte) (int, error) {
	n := 0
	for n < len(p) {
		if len(o.rest) > 0 {
			k := copy(p[n:], o.rest)
			o.rest = o.rest[k:]
			n += k
			continue
		}
		if o.ended || n > 0 && o.conn.Frontend().ReadBufferLen() == 0 {
			break
		}
		o.step()
	}
	if n > 0 {
		return n, nil
	}
	return 0, o.err
}

// step receives one message and acts on it.
func (o *copyOut) step() {
	// context.Background makes pgconn skip its own watch of a context,
	// which costs a lock and an allocation per message, that is per row;
	// o.ctx is watched instead once for the whole COPY (see startCopyOut).
	msg, err := o.conn.ReceiveMessage(context.Background())
	if err != nil {
		o.lose(err)
		return
	}
	switch m := msg.(type) {
	case *pgproto3.CopyData:
		o.rest = m.Data
	case *pgproto3.CopyOutResponse:
		o.started = true
		if m.OverallFormat != 1 {
			o.failure = errors.New("the COPY sends text, not binary")
		}
	case *pgproto3.CopyInResponse, *pgproto3.CopyBothResponse:
		o.failure = errors.New("the statement is not a COPY TO STDOUT")
		o.conn.Frontend().Send(&pgproto3.CopyFail{Message: "not a COPY TO STDOUT"})
		if err := o.conn.Frontend().Flush(); err != nil {
			o.lose(err)
		}
	case *pgproto3.CommandComplete:
		o.tag = pgconn.NewCommandTag(string(m.CommandTag))
	case *pgproto3.ErrorResponse:
		if o.failure == nil {
			o.failure = pgconn.ErrorResponseToPgError(m)
		}
	case *pgproto3.ReadyForQuery:
		o.end()
		switch {
		case o.failure != nil:
			o.err = &copyFailed{o.failure}
		case !o.started:
			o.err = &copyFailed{errors.New("the statement is not a COPY TO STDOUT")}
		default:
			o.err = io.EOF
		}
	}
}

// end stops the context watch; a watch that fired has set a deadline,
// which is cleared now that the connection is free.
func (o *copyOut) end() {
	o.ended = true
	if o.stopWatch != nil && !o.stopWatch() {
		<-o.watchDone
		_ = o.conn.Conn().SetDeadline(time.Time{}) // the connection is closed if this fails
	}
}

// lose ends the COPY on a broken connection, closing it.
func (o *copyOut) lose(err error) {
	if o.ctx.Err() != nil {
		err = o.ctx.Err()
	}
	o.rest = nil
	o.lostErr = err
	o.err = &copyFailed{err}
	o.end()
	ctx, cancel := context.WithTimeout(context.WithoutCancel(o.ctx), time.Second)
	defer cancel()
	_ = o.conn.Close(ctx) // the connection is unusable whatever Close says
}

// abort ends a COPY still running: it discards messages until the
// connection is free, asking the server meanwhile to cancel the COPY.
// The request is repeated because one that reaches the server before the
// COPY has begun (the statement still on its way) finds the session idle
// and is ignored, as it is once the COPY has ended; so no cancellation can
// hit a later statement. Each request returns only once the server has
// passed it on, and the last one has returned before abort does.
func (o *copyOut) abort() {
	if o.ended {
		return
	}
	stop := make(chan struct{})
	var wg sync.WaitGroup
	wg.Go(func() {
		wait := 50 * time.Millisecond
		for {
			// An error means the request did not reach the server; the
			// next round tries again.
			_ = o.conn.CancelRequest(o.ctx)
			t := time.NewTimer(wait)
			select {
			case <-stop:
				t.Stop()
				return
			case <-o.ctx.Done():
				t.Stop()
				return
			case <-t.C:
			}
			wait = min(2*wait, time.Second)
		}
	})
	for !o.ended {
		o.rest = nil
		o.step()
	}
	close(stop)
	wg.Wait()
}
