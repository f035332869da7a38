package dbio

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
)

// copySignature opens every binary COPY stream.
const copySignature = "PGCOPY\n\xff\r\n\x00"

// MaxFieldBytes is the largest field a Decoder accepts: PostgreSQL's own
// limit on one value (MaxAllocSize, 1 GiB − 1).
const MaxFieldBytes = 1<<30 - 1

// DefaultDecoderBuffer is the Decoder's initial buffer size when
// DecoderConfig.BufSize is zero. A large buffer means few reads from the
// source and a rare copy of the partial tuple left at the buffer's end.
const DefaultDecoderBuffer = 1 << 20

// DecoderConfig adjusts a Decoder. The zero value accepts any valid
// stream.
type DecoderConfig struct {
	// Fields is the number of fields every tuple must have; zero accepts
	// any number.
	Fields int
	// BufSize is the initial buffer size in bytes; zero means
	// DefaultDecoderBuffer. The buffer grows as needed for a field larger
	// than it, but only as data arrives, so a bogus length can never make
	// it allocate more than twice the bytes actually read.
	BufSize int
}

// DecodeError reports malformed binary COPY data.
type DecodeError struct {
	// Offset is the byte offset in the stream of the header, tuple or
	// field where the problem was found.
	Offset int64
	// Tuple is the 1-based number of the tuple, 0 for the header.
	Tuple int64
	// Field is the 1-based number of the field within the tuple, 0 when
	// the error is not about one field.
	Field int
	// Trailer is set when the error is about the trailer, whose place is
	// that of tuple number Tuple.
	Trailer bool
	// Err says what is wrong; truncated data wraps io.ErrUnexpectedEOF.
	Err error
}

func (e *DecodeError) Error() string {
	switch {
	case e.Trailer:
		return fmt.Sprintf("binary copy: byte %d: trailer: %v", e.Offset, e.Err)
	case e.Tuple == 0:
		return fmt.Sprintf("binary copy: byte %d: header: %v", e.Offset, e.Err)
	case e.Field == 0:
		return fmt.Sprintf("binary copy: byte %d: tuple %d: %v", e.Offset, e.Tuple, e.Err)
	default:
		return fmt.Sprintf("binary copy: byte %d: tuple %d, field %d: %v", e.Offset, e.Tuple, e.Field, e.Err)
	}
}

func (e *DecodeError) Unwrap() error { return e.Err }

// errTruncated is the cause of a DecodeError for data that stops in the
// middle of an item.
var errTruncated = fmt.Errorf("data ends early: %w", io.ErrUnexpectedEOF)

// Decoder reads PostgreSQL's binary COPY format from an io.Reader.
//
// The format (PostgreSQL documentation, "COPY", section "Binary Format") is
// a header, tuples, and a trailer, every integer in network byte order:
//
//	header:  the 11-byte signature "PGCOPY\n\377\r\n\0",
//	         int32 flags (bit 16: OIDs included; bits 0-15 must be zero;
//	         bits 17-31 are to be ignored), int32 extension length L ≥ 0,
//	         L bytes of extension data (skipped);
//	tuple:   int16 field count n ≥ 0, then n times int32 length ℓ and ℓ
//	         bytes, or ℓ = −1 and no bytes for NULL;
//	trailer: int16 −1, after which the data must end.
//
// Streams with OIDs are rejected (PostgreSQL has not produced them since
// version 12). Any input gives a tuple, io.EOF, or a *DecodeError (or the
// source's own error), never a panic or a hang; memory stays within twice
// the bytes read.
type Decoder struct {
	r    io.Reader
	cfg  DecoderConfig
	buf  []byte
	pos  int   // start of unread data in buf
	end  int   // end of data in buf
	base int64 // stream offset of buf[0]
	rerr error // the source's sticky error, io.EOF included

	header bool  // header read
	tuples int64 // tuples returned so far
	spans  []int // start and end of each field of the current tuple, relative to its start; start −1 for NULL
	err    error // sticky result: io.EOF after the trailer, or the failure
	empty  int   // consecutive reads that returned nothing
}

// NewDecoder returns a Decoder reading from r.
func NewDecoder(r io.Reader, cfg DecoderConfig) *Decoder {
	if cfg.Fields < 0 {
		panic(fmt.Sprintf("dbio: DecoderConfig.Fields is %d", cfg.Fields))
	}
	size := cfg.BufSize
	if size <= 0 {
		size = DefaultDecoderBuffer
	}
	size = max(size, 64)
	return &Decoder{r: r, cfg: cfg, buf: make([]byte, size)}
}

// Tuples is the number of tuples returned so far.
func (d *Decoder) Tuples() int64 { return d.tuples }

// Next reads one tuple and returns its fields appended to fields[:0]: a nil
// field is a NULL, any other field is its bytes (possibly empty). The field
// slices point into the Decoder's buffer and are valid until the next call.
// After the trailer Next returns io.EOF; on malformed data a *DecodeError.
// Errors are sticky.
//
// Passing the previous result back as fields makes Next allocate nothing.
func (d *Decoder) Next(fields [][]byte) ([][]byte, error) {
	fields = fields[:0]
	if d.err != nil {
		return fields, d.err
	}
	if !d.header {
		if err := d.readHeader(); err != nil {
			d.err = err
			return fields, err
		}
		d.header = true
	}
	tuple := d.tuples + 1
	start := d.base + int64(d.pos)
	if d.end-d.pos < 2 {
		if err := d.fill(2); err != nil {
			if err == io.EOF && d.end == d.pos {
				err = fmt.Errorf("data ends without a trailer: %w", io.ErrUnexpectedEOF)
			}
			return fields, d.fail(start, tuple, 0, err)
		}
	}
	n := int(int16(binary.BigEndian.Uint16(d.buf[d.pos:])))
	if n == -1 {
		d.pos += 2
		return fields, d.trailer()
	}
	if n < 0 {
		return fields, d.fail(start, tuple, 0, fmt.Errorf("field count %d", n))
	}
	if d.cfg.Fields > 0 && n != d.cfg.Fields {
		return fields, d.fail(start, tuple, 0, fmt.Errorf("%d fields, want %d", n, d.cfg.Fields))
	}
	spans := d.spans[:0]
	off := 2
	for i := range n {
		if d.end-d.pos < off+4 {
			if err := d.fill(off + 4); err != nil {
				return fields, d.fail(d.base+int64(d.pos+off), tuple, i+1, err)
			}
		}
		l := int(int32(binary.BigEndian.Uint32(d.buf[d.pos+off:])))
		if l == -1 {
			spans = append(spans, -1, -1)
			off += 4
			continue
		}
		if l < 0 || l > MaxFieldBytes {
			return fields, d.fail(d.base+int64(d.pos+off), tuple, i+1, fmt.Errorf("field length %d", l))
		}
		if d.end-d.pos < off+4+l {
			if err := d.fill(off + 4 + l); err != nil {
				return fields, d.fail(d.base+int64(d.pos+off), tuple, i+1, err)
			}
		}
		spans = append(spans, off+4, off+4+l)
		off += 4 + l
	}
	d.spans = spans
	t := d.buf[d.pos : d.pos+off]
	for i := 0; i < len(spans); i += 2 {
		if spans[i] < 0 {
			fields = append(fields, nil)
		} else {
			fields = append(fields, t[spans[i]:spans[i+1]:spans[i+1]])
		}
	}
	d.pos += off
	d.tuples = tuple
	return fields, nil
}

// float8Row is Next's fast path for the Reader's common case: a tuple of a
// non-NULL key and len(x) non-NULL, finite float8 values that lies wholly
// in the buffer. It stores the values in x and returns the key, valid
// until the next call. Any other case (NULL, another length or field
// count, NaN or ±Inf, a tuple not yet buffered, the trailer, an error)
// returns ok false and consumes nothing, and Next then reads the tuple.
func (d *Decoder) float8Row(x []float64) (key []byte, ok bool) {
	if !d.header || d.err != nil || d.cfg.Fields != 0 && d.cfg.Fields != len(x)+1 {
		return nil, false
	}
	b := d.buf[d.pos:d.end]
	if len(b) < 6 || int(int16(binary.BigEndian.Uint16(b))) != len(x)+1 {
		return nil, false
	}
	kl := int(int32(binary.BigEndian.Uint32(b[2:])))
	if kl < 0 || kl > len(b)-6-12*len(x) {
		return nil, false
	}
	key = b[6 : 6+kl : 6+kl]
	p := b[6+kl : 6+kl+12*len(x)]
	for j := range x {
		f := p[12*j : 12*j+12]
		v := math.Float64frombits(binary.BigEndian.Uint64(f[4:]))
		if binary.BigEndian.Uint32(f) != 8 || v-v != 0 { // v-v is NaN for NaN and ±Inf
			return nil, false
		}
		x[j] = v
	}
	d.pos += 6 + kl + 12*len(x)
	d.tuples++
	return key, true
}

// readHeader reads and checks the header.
func (d *Decoder) readHeader() error {
	const fixed = len(copySignature) + 8
	if err := d.fill(fixed); err != nil {
		if d.end-d.pos < len(copySignature) && string(d.buf[d.pos:d.end]) != copySignature[:d.end-d.pos] {
			return d.fail(0, 0, 0, errors.New("bad signature"))
		}
		return d.fail(0, 0, 0, err)
	}
	h := d.buf[d.pos : d.pos+fixed]
	if string(h[:len(copySignature)]) != copySignature {
		return d.fail(0, 0, 0, errors.New("bad signature"))
	}
	flags := binary.BigEndian.Uint32(h[11:])
	if flags&0xffff != 0 {
		return d.fail(0, 0, 0, fmt.Errorf("unknown critical flags %#x", flags&0xffff))
	}
	if flags&(1<<16) != 0 {
		return d.fail(0, 0, 0, errors.New("tuples with OIDs are not supported"))
	}
	ext := int64(int32(binary.BigEndian.Uint32(h[15:])))
	if ext < 0 {
		return d.fail(0, 0, 0, fmt.Errorf("extension length %d", ext))
	}
	d.pos += fixed
	// Skip the extension area without keeping it.
	for ext > 0 {
		if d.end == d.pos {
			if err := d.fill(1); err != nil {
				return d.fail(0, 0, 0, err)
			}
		}
		k := min(int64(d.end-d.pos), ext)
		d.pos += int(k)
		ext -= k
	}
	return nil
}

// trailer checks that nothing follows the trailer and ends the stream.
func (d *Decoder) trailer() error {
	at := d.base + int64(d.pos)
	err := d.fill(1)
	switch {
	case err == io.EOF && d.end == d.pos:
		d.err = io.EOF
		return io.EOF
	case err != nil && err != io.EOF:
		d.err = &DecodeError{Offset: at - 2, Tuple: d.tuples + 1, Trailer: true, Err: err}
		return d.err
	}
	// Count what follows, up to a bound, for the message.
	extra := int64(d.end - d.pos)
	for extra < 1<<20 && d.fill(d.end-d.pos+1) == nil {
		extra = int64(d.end - d.pos)
	}
	more := ""
	if extra >= 1<<20 {
		more = " or more"
	}
	d.err = &DecodeError{Offset: at - 2, Tuple: d.tuples + 1, Trailer: true, Err: fmt.Errorf("followed by %d bytes%s", extra, more)}
	return d.err
}

// fail makes err, located at offset, tuple and field, the sticky result.
// A source error other than io.EOF is passed on as it is, wrapped with the
// position; io.EOF in the middle of an item becomes a truncation.
func (d *Decoder) fail(offset, tuple int64, field int, err error) error {
	if err == io.EOF {
		err = errTruncated
	}
	d.err = &DecodeError{Offset: offset, Tuple: tuple, Field: field, Err: err}
	return d.err
}

// fill makes at least k unread bytes available at buf[pos:], reading from
// the source as needed. It returns io.EOF (or the source's error) when the
// data ends first; the bytes read so far stay available.
func (d *Decoder) fill(k int) error {
	for d.end-d.pos < k {
		if d.rerr != nil {
			return d.rerr
		}
		if d.end == len(d.buf) {
			if d.pos > 0 {
				// Move the partial item to the front.
				copy(d.buf, d.buf[d.pos:d.end])
				d.base += int64(d.pos)
				d.end -= d.pos
				d.pos = 0
			} else {
				// The item is larger than the buffer, which is full of
				// it: grow, at most doubling, so that growth follows the
				// data that actually arrives.
				nb := make([]byte, min(2*len(d.buf), k))
				copy(nb, d.buf[:d.end])
				d.buf = nb
			}
		}
		n, err := d.r.Read(d.buf[d.end:])
		if n < 0 || n > len(d.buf)-d.end {
			d.rerr = fmt.Errorf("read returned %d bytes for a %d-byte buffer", n, len(d.buf)-d.end)
			return d.rerr
		}
		d.end += n
		if err != nil {
			d.rerr = err
		} else if n == 0 {
			d.empty++
			if d.empty >= 100 {
				d.rerr = io.ErrNoProgress
			}
		} else {
			d.empty = 0
		}
	}
	return nil
}
