package dbio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"io"
	"math"
	"testing"
	"testing/iotest"
)

// The streams below are built by hand from the layout in PostgreSQL's
// documentation of COPY ("Binary Format"): an 11-byte signature, int32
// flags, int32 header-extension length, tuples, int16 −1.

// be16, be32 and be64 give big-endian bytes.
func be16(v int16) []byte { return binary.BigEndian.AppendUint16(nil, uint16(v)) }
func be32(v int32) []byte { return binary.BigEndian.AppendUint32(nil, uint32(v)) }
func be64(v uint64) []byte {
	return binary.BigEndian.AppendUint64(nil, v)
}

// cat joins byte slices.
func cat(parts ...[]byte) []byte { return bytes.Join(parts, nil) }

// hdr is a header with the given flags and extension bytes.
func hdr(flags int32, ext []byte) []byte {
	return cat([]byte(copySignature), be32(flags), be32(int32(len(ext))), ext)
}

// tup is a tuple of the given fields, nil for NULL.
func tup(fields ...[]byte) []byte {
	b := be16(int16(len(fields)))
	for _, f := range fields {
		if f == nil {
			b = append(b, be32(-1)...)
			continue
		}
		b = append(b, be32(int32(len(f)))...)
		b = append(b, f...)
	}
	return b
}

var trl = be16(-1)

// decodeAll reads every tuple, copying the fields (which are valid only
// until the next call), and returns them with the final error.
func decodeAll(r io.Reader, cfg DecoderConfig) ([][][]byte, error) {
	d := NewDecoder(r, cfg)
	var out [][][]byte
	var fields [][]byte
	for {
		var err error
		fields, err = d.Next(fields)
		if err != nil {
			return out, err
		}
		t := make([][]byte, len(fields))
		for i, f := range fields {
			if f != nil {
				t[i] = append([]byte{}, f...)
			}
		}
		out = append(out, t)
	}
}

func sameTuples(a, b [][][]byte) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if len(a[i]) != len(b[i]) {
			return false
		}
		for j := range a[i] {
			if (a[i][j] == nil) != (b[i][j] == nil) || !bytes.Equal(a[i][j], b[i][j]) {
				return false
			}
		}
	}
	return true
}

func TestDecoder(t *testing.T) {
	pi := be64(math.Float64bits(math.Pi))
	big := bytes.Repeat([]byte("x"), 1000)
	// Offsets in the messages: the plain header is 19 bytes.
	cases := []struct {
		name    string
		in      []byte
		fields  int
		want    [][][]byte
		wantErr string // "" means a clean io.EOF
	}{
		{
			name: "valid",
			in:   cat(hdr(0, nil), tup(be64(7), pi), tup([]byte{}, nil), trl),
			want: [][][]byte{{be64(7), pi}, {{}, nil}},
		},
		{
			name: "no tuples",
			in:   cat(hdr(0, nil), trl),
		},
		{
			name: "tuple of no fields",
			in:   cat(hdr(0, nil), tup(), trl),
			want: [][][]byte{{}},
		},
		{
			name: "header extension and optional flags skipped",
			in:   cat(hdr(1<<17|1<<30, []byte("extra")), tup(pi), trl),
			want: [][][]byte{{pi}},
		},
		{
			name: "field larger than the buffer",
			in:   cat(hdr(0, nil), tup(big, pi), tup(pi, big), trl),
			want: [][][]byte{{big, pi}, {pi, big}},
		},
		{
			name:   "field count as required",
			in:     cat(hdr(0, nil), tup(pi, pi), trl),
			fields: 2,
			want:   [][][]byte{{pi, pi}},
		},
		{
			name:    "empty",
			in:      nil,
			wantErr: "binary copy: byte 0: header: data ends early: unexpected EOF",
		},
		{
			name:    "bad signature",
			in:      cat([]byte("PGCOPY\n\xff\r\n\x01"), be32(0), be32(0), trl),
			wantErr: "binary copy: byte 0: header: bad signature",
		},
		{
			name:    "text instead of binary",
			in:      []byte("1\t2\n"),
			wantErr: "binary copy: byte 0: header: bad signature",
		},
		{
			name:    "truncated header",
			in:      cat([]byte(copySignature), be32(0)[:3]),
			wantErr: "binary copy: byte 0: header: data ends early: unexpected EOF",
		},
		{
			name:    "truncated extension",
			in:      cat([]byte(copySignature), be32(0), be32(10), []byte("abc")),
			wantErr: "binary copy: byte 0: header: data ends early: unexpected EOF",
		},
		{
			name:    "negative extension length",
			in:      cat([]byte(copySignature), be32(0), be32(-3), trl),
			wantErr: "binary copy: byte 0: header: extension length -3",
		},
		{
			name:    "critical flag",
			in:      cat(hdr(1<<3, nil), trl),
			wantErr: "binary copy: byte 0: header: unknown critical flags 0x8",
		},
		{
			name:    "oids",
			in:      cat(hdr(1<<16, nil), trl),
			wantErr: "binary copy: byte 0: header: tuples with OIDs are not supported",
		},
		{
			name:    "truncated field count",
			in:      cat(hdr(0, nil), []byte{0}),
			wantErr: "binary copy: byte 19: tuple 1: data ends early: unexpected EOF",
		},
		{
			name:    "truncated field length",
			in:      cat(hdr(0, nil), be16(1), []byte{0, 0}),
			wantErr: "binary copy: byte 21: tuple 1, field 1: data ends early: unexpected EOF",
		},
		{
			name:    "truncated field data",
			in:      cat(hdr(0, nil), tup(pi), be16(2), be32(8), pi[:3]),
			want:    [][][]byte{{pi}},
			wantErr: "binary copy: byte 35: tuple 2, field 1: data ends early: unexpected EOF",
		},
		{
			name:    "truncated second field",
			in:      cat(hdr(0, nil), be16(2), be32(8), pi, be32(8), pi[:7]),
			wantErr: "binary copy: byte 33: tuple 1, field 2: data ends early: unexpected EOF",
		},
		{
			name:    "negative field length",
			in:      cat(hdr(0, nil), be16(1), be32(-2), trl),
			wantErr: "binary copy: byte 21: tuple 1, field 1: field length -2",
		},
		{
			name:    "huge field length",
			in:      cat(hdr(0, nil), be16(1), be32(math.MaxInt32), trl),
			wantErr: "binary copy: byte 21: tuple 1, field 1: field length 2147483647",
		},
		{
			name:    "largest field length with little data",
			in:      cat(hdr(0, nil), be16(1), be32(MaxFieldBytes), []byte("short"), trl),
			wantErr: "binary copy: byte 21: tuple 1, field 1: data ends early: unexpected EOF",
		},
		{
			name:    "negative field count",
			in:      cat(hdr(0, nil), be16(-5), trl),
			wantErr: "binary copy: byte 19: tuple 1: field count -5",
		},
		{
			name:    "field count mismatch",
			in:      cat(hdr(0, nil), tup(pi, pi), tup(pi, pi, pi), trl),
			fields:  2,
			want:    [][][]byte{{pi, pi}},
			wantErr: "binary copy: byte 45: tuple 2: 3 fields, want 2",
		},
		{
			name:    "missing trailer",
			in:      cat(hdr(0, nil), tup(pi), tup(pi)),
			want:    [][][]byte{{pi}, {pi}},
			wantErr: "binary copy: byte 47: tuple 3: data ends without a trailer: unexpected EOF",
		},
		{
			name:    "trailing garbage",
			in:      cat(hdr(0, nil), tup(pi), trl, []byte("abc")),
			want:    [][][]byte{{pi}},
			wantErr: "binary copy: byte 33: trailer: followed by 3 bytes",
		},
		{
			name:    "second stream after the trailer",
			in:      cat(hdr(0, nil), trl, hdr(0, nil), trl),
			wantErr: "binary copy: byte 19: trailer: followed by 21 bytes",
		},
	}
	// Each case is read through buffers of several sizes and one byte at a
	// time, so that every item meets a buffer boundary somewhere.
	readers := []struct {
		name string
		size int
		wrap func(io.Reader) io.Reader
	}{
		{"default buffer", 0, func(r io.Reader) io.Reader { return r }},
		{"64-byte buffer", 64, func(r io.Reader) io.Reader { return r }},
		{"100-byte buffer, one byte per read", 100, iotest.OneByteReader},
		{"64-byte buffer, error with last data", 64, iotest.DataErrReader},
	}
	for _, c := range cases {
		for _, rd := range readers {
			t.Run(c.name+"/"+rd.name, func(t *testing.T) {
				cfg := DecoderConfig{Fields: c.fields, BufSize: rd.size}
				got, err := decodeAll(rd.wrap(bytes.NewReader(c.in)), cfg)
				if !sameTuples(got, c.want) {
					t.Errorf("tuples = %q, want %q", got, c.want)
				}
				if c.wantErr == "" {
					if err != io.EOF {
						t.Fatalf("err = %v, want io.EOF", err)
					}
					return
				}
				if err == nil || err.Error() != c.wantErr {
					t.Fatalf("err = %v\nwant    %s", err, c.wantErr)
				}
				var de *DecodeError
				if !errors.As(err, &de) {
					t.Errorf("err is %T, want *DecodeError", err)
				}
			})
		}
	}
}

// TestDecoderSticky checks that an error, io.EOF included, repeats.
func TestDecoderSticky(t *testing.T) {
	cases := []struct {
		name string
		in   []byte
		want string
	}{
		{"eof", cat(hdr(0, nil), trl), "EOF"},
		{"bad", []byte("nope"), "binary copy: byte 0: header: bad signature"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			d := NewDecoder(bytes.NewReader(c.in), DecoderConfig{})
			for i := range 3 {
				_, err := d.Next(nil)
				if err == nil || err.Error() != c.want {
					t.Fatalf("call %d: err = %v, want %s", i+1, err, c.want)
				}
			}
		})
	}
}

// errReader returns some data and then a failure of its own.
type errReader struct {
	data []byte
	err  error
}

func (r *errReader) Read(p []byte) (int, error) {
	if len(r.data) == 0 {
		return 0, r.err
	}
	n := copy(p, r.data)
	r.data = r.data[n:]
	return n, nil
}

// TestDecoderSourceError checks that the source's own error is kept, with
// the position, and not turned into a truncation.
func TestDecoderSourceError(t *testing.T) {
	boom := errors.New("connection reset")
	pi := be64(math.Float64bits(math.Pi))
	r := &errReader{data: cat(hdr(0, nil), tup(pi), be16(1)), err: boom}
	got, err := decodeAll(r, DecoderConfig{})
	if len(got) != 1 {
		t.Errorf("%d tuples before the failure, want 1", len(got))
	}
	const want = "binary copy: byte 35: tuple 2, field 1: connection reset"
	if err == nil || err.Error() != want {
		t.Fatalf("err = %v, want %s", err, want)
	}
	if !errors.Is(err, boom) {
		t.Errorf("errors.Is(err, source error) = false")
	}
	if errors.Is(err, io.ErrUnexpectedEOF) {
		t.Errorf("a source error reported as truncation")
	}
}

// stallReader never returns data nor an error.
type stallReader struct{}

func (stallReader) Read([]byte) (int, error) { return 0, nil }

// TestDecoderNoProgress checks that a source that returns nothing forever
// gives an error rather than a hang.
func TestDecoderNoProgress(t *testing.T) {
	_, err := NewDecoder(stallReader{}, DecoderConfig{}).Next(nil)
	if !errors.Is(err, io.ErrNoProgress) {
		t.Fatalf("err = %v, want io.ErrNoProgress", err)
	}
}

// TestDecoderBoundedGrowth checks that a field announcing 1 GiB on a short
// stream grows the buffer only with the data that arrived.
func TestDecoderBoundedGrowth(t *testing.T) {
	in := cat(hdr(0, nil), be16(1), be32(MaxFieldBytes), bytes.Repeat([]byte{1}, 5000))
	d := NewDecoder(bytes.NewReader(in), DecoderConfig{BufSize: 64})
	if _, err := d.Next(nil); !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Fatalf("err = %v, want a truncation", err)
	}
	if n := len(d.buf); n > 2*len(in) {
		t.Errorf("buffer grew to %d bytes for %d bytes of data", n, len(in))
	}
}

// TestDecoderNoAllocs checks that decoding a tuple allocates nothing once
// the fields slice is reused.
func TestDecoderNoAllocs(t *testing.T) {
	in := decoderStream(1000, 8)
	d := NewDecoder(bytes.NewReader(in), DecoderConfig{Fields: 9})
	fields, err := d.Next(nil)
	if err != nil {
		t.Fatal(err)
	}
	allocs := testing.AllocsPerRun(500, func() {
		if fields, err = d.Next(fields); err != nil {
			t.Fatal(err)
		}
	})
	if allocs != 0 {
		t.Errorf("%v allocations per tuple, want 0", allocs)
	}
}

// decoderStream is a valid stream of n tuples of an int8 key and d float8
// values, as CopySQL's COPY sends them.
func decoderStream(n, d int) []byte {
	b := hdr(0, nil)
	for i := range n {
		b = append(b, be16(int16(d+1))...)
		b = append(b, be32(8)...)
		b = append(b, be64(uint64(i))...)
		for j := range d {
			b = append(b, be32(8)...)
			b = append(b, be64(math.Float64bits(float64(i)+float64(j)/8))...)
		}
	}
	return append(b, trl...)
}

// BenchmarkDecoder measures decoding of rows of an int8 key and 8 float8
// features from memory, the Decoder's share of reading.
func BenchmarkDecoder(b *testing.B) {
	const rows = 100000
	in := decoderStream(rows, 8)
	b.SetBytes(int64(len(in)))
	b.ResetTimer()
	var sum float64
	for range b.N {
		d := NewDecoder(bytes.NewReader(in), DecoderConfig{Fields: 9})
		var fields [][]byte
		var err error
		for {
			if fields, err = d.Next(fields); err != nil {
				break
			}
			sum += math.Float64frombits(binary.BigEndian.Uint64(fields[1]))
		}
		if err != io.EOF {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
	if sum == 0 {
		b.Fatal("nothing decoded")
	}
}
