package dbio

import (
	"bytes"
	"io"
	"math"
	"testing"
	"testing/iotest"
)

// FuzzDecoder feeds arbitrary bytes to the Decoder. Besides never
// panicking or hanging (the fuzzer reports both), it checks two
// properties:
//   - the result does not depend on how the data arrives: a 64-byte
//     buffer filled by whole reads and the default buffer filled one byte
//     at a time give the same tuples and the same error;
//   - the Reader's fast path (float8Row, tried before Next on every
//     tuple) gives the same tuples and error as Next alone;
//   - a stream accepted with a plain header (no flags, no extension) is
//     exactly what the Encoder writes for the tuples decoded from it.
//
// The seed corpus is in testdata/fuzz/FuzzDecoder; run the fuzzer with
//
//	go test ./dbio/ -run '^$' -fuzz FuzzDecoder -fuzztime 1m
func FuzzDecoder(f *testing.F) {
	pi := be64(math.Float64bits(math.Pi))
	f.Add(cat(hdr(0, nil), tup(be64(1), pi, nil), tup([]byte("key"), pi, pi), trl))
	f.Add(cat(hdr(0, []byte("ext")), tup(), trl))
	f.Add(cat(hdr(0, nil), be16(1), be32(MaxFieldBytes), pi))
	f.Add(cat(hdr(0, nil), tup(pi), trl, []byte{0}))
	f.Add([]byte(copySignature))
	f.Fuzz(func(t *testing.T, data []byte) {
		got, err := decodeAll(bytes.NewReader(data), DecoderConfig{BufSize: 64})
		got2, err2 := decodeAll(iotest.OneByteReader(bytes.NewReader(data)), DecoderConfig{})
		if !sameTuples(got, got2) {
			t.Fatalf("tuples differ with the way data arrives:\n%q\n%q", got, got2)
		}
		if err == nil || err2 == nil {
			t.Fatalf("decoding ended without an error: %v, %v", err, err2)
		}
		if err.Error() != err2.Error() {
			t.Fatalf("errors differ with the way data arrives:\n%v\n%v", err, err2)
		}
		for d := 1; d <= 2; d++ {
			got3, err3 := decodeFast(bytes.NewReader(data), d)
			if !sameTuples(got, got3) {
				t.Fatalf("fast path for %d features changes the tuples:\n%q\n%q", d, got, got3)
			}
			if err3 == nil || err3.Error() != err.Error() {
				t.Fatalf("fast path for %d features changes the error:\n%v\n%v", d, err, err3)
			}
		}
		if err != io.EOF || !bytes.Equal(data[:len(copyHeader)], []byte(copyHeader)) {
			return
		}
		var e Encoder
		e.buf = append(e.buf, copyHeader...)
		for _, tuple := range got {
			e.Begin(len(tuple))
			for _, f := range tuple {
				e.Raw(f)
			}
		}
		e.buf = append(e.buf, trl...)
		if !bytes.Equal(e.buf, data) {
			t.Fatalf("re-encoded stream differs:\n%q\n%q", e.buf, data)
		}
	})
}

// decodeFast reads every tuple as the Reader does, trying float8Row for
// tuples of a key and d float8 values before Next, and returns the tuples
// in Next's form.
func decodeFast(r io.Reader, d int) ([][][]byte, error) {
	dec := NewDecoder(r, DecoderConfig{BufSize: 64})
	var out [][][]byte
	x := make([]float64, d)
	var fields [][]byte
	for {
		if key, ok := dec.float8Row(x); ok {
			t := [][]byte{append([]byte{}, key...)}
			for _, v := range x {
				t = append(t, be64(math.Float64bits(v)))
			}
			out = append(out, t)
			continue
		}
		var err error
		fields, err = dec.Next(fields)
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
