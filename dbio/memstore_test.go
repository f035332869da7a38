package dbio

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
)

// memRows appends the rows to m in chunks whose sizes cycle through sizes,
// as a Reader would deliver them.
func memRows(m *MemStore, keys Keys, x []float64, d int, sizes []int) {
	n := keys.Len()
	for lo, j := 0, 0; lo < n; j++ {
		hi := min(lo+sizes[j%len(sizes)], n)
		c := Chunk{N: hi - lo, D: d, X: x[lo*d : hi*d], First: int64(lo)}
		for i := lo; i < hi; i++ {
			c.Keys.Append(keys.At(i))
		}
		m.Append(&c)
		lo = hi
	}
}

// TestMemStoreChunks checks that a MemStore hands back exactly the rows it
// was given, in chunks [c·R, min((c+1)·R, n)) whatever the sizes of the
// appended chunks, and that a Spill of the same R given the same rows has
// the same chunks, bit for bit (float64).
func TestMemStoreChunks(t *testing.T) {
	cases := []struct {
		name    string
		n, d, r int
		sizes   []int
	}{
		{"one row per append", 23, 3, 7, []int{1}},
		{"appends of 7 into chunks of 5", 61, 2, 5, []int{7}},
		{"mixed appends", 1000, 4, 64, []int{1, 7, 100, 3}},
		{"appends larger than a chunk", 300, 1, 16, []int{65536}},
		{"exact multiple", 128, 5, 32, []int{32}},
		{"single chunk", 10, 8, 4096, []int{3}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			keys, x := spillRows(c.n, c.d, 11, true, false)
			m := NewMemStore(c.d, MemStoreConfig{ChunkRows: c.r})
			memRows(m, keys, x, c.d, c.sizes)
			sp, err := CreateSpill(t.TempDir(), c.d, SpillConfig{ChunkRows: c.r})
			if err != nil {
				t.Fatal(err)
			}
			defer sp.Remove()
			appendRows(t, sp, keys, x, c.d, []int{c.n})
			if err := sp.Finish(); err != nil {
				t.Fatal(err)
			}
			if m.Len() != c.n || m.Dim() != c.d {
				t.Fatalf("Len %d, Dim %d; want %d, %d", m.Len(), m.Dim(), c.n, c.d)
			}
			want := (c.n + c.r - 1) / c.r
			if m.Chunks() != want || sp.Chunks() != want {
				t.Fatalf("Chunks: memory %d, spill %d; want %d", m.Chunks(), sp.Chunks(), want)
			}
			for ch := range m.Chunks() {
				rows, first, err := m.Chunk(ch, nil)
				if err != nil {
					t.Fatal(err)
				}
				lo, hi := ch*c.r, min((ch+1)*c.r, c.n)
				if first != lo || len(rows) != (hi-lo)*c.d {
					t.Fatalf("chunk %d: first %d, %d values; want %d, %d", ch, first, len(rows), lo, (hi-lo)*c.d)
				}
				srows, sfirst, err := sp.Chunk(ch, nil)
				if err != nil {
					t.Fatal(err)
				}
				if sfirst != first || len(srows) != len(rows) {
					t.Fatalf("chunk %d: spill has first %d and %d values, memory %d and %d", ch, sfirst, len(srows), first, len(rows))
				}
				for i, v := range rows {
					if math.Float64bits(v) != math.Float64bits(x[lo*c.d+i]) || math.Float64bits(v) != math.Float64bits(srows[i]) {
						t.Fatalf("chunk %d value %d: memory %v, spill %v, want %v", ch, i, v, srows[i], x[lo*c.d+i])
					}
				}
				var mk, sk Keys
				mk.Append([]byte("before")) // ChunkKeys appends
				sk.Append([]byte("before"))
				if err := m.ChunkKeys(ch, &mk); err != nil {
					t.Fatal(err)
				}
				if err := sp.ChunkKeys(ch, &sk); err != nil {
					t.Fatal(err)
				}
				if mk.Len() != hi-lo+1 || !bytes.Equal(mk.At(0), []byte("before")) {
					t.Fatalf("chunk %d: %d keys after the one before, want %d", ch, mk.Len()-1, hi-lo)
				}
				for i := lo; i < hi; i++ {
					if !bytes.Equal(mk.At(i-lo+1), keys.At(i)) || !bytes.Equal(sk.At(i-lo+1), keys.At(i)) {
						t.Fatalf("chunk %d: key of row %d differs", ch, i)
					}
				}
			}
		})
	}
}

// TestMemStoreBytes checks Bytes against the allocation the doc comment
// describes, for fixed-size keys where it is exact: per chunk R·d·8 bytes
// of features, R·8 of key bytes (the first appended chunk's keys are 8
// bytes each) and R·8 of key ends (int on a 64-bit platform).
func TestMemStoreBytes(t *testing.T) {
	if intBytes != 8 {
		t.Fatalf("this test assumes 64-bit ints; intBytes is %d", intBytes)
	}
	const d, r = 3, 4
	m := NewMemStore(d, MemStoreConfig{ChunkRows: r})
	if m.Bytes() != 0 {
		t.Fatalf("empty store: %d bytes", m.Bytes())
	}
	perChunk := int64(r*d*8 + r*8 + r*8)
	var c Chunk
	c.D = d
	for i := range 10 {
		c.N, c.X = 1, []float64{float64(i), 0, 1}
		c.Keys.Reset()
		c.Keys.Append([]byte(fmt.Sprintf("%08d", i)))
		m.Append(&c)
		if want := int64(i/r+1) * perChunk; m.Bytes() != want {
			t.Fatalf("after %d rows: %d bytes, want %d", i+1, m.Bytes(), want)
		}
	}
	// Longer keys than the first chunk's grow its key bytes, and the full
	// chunk is trimmed to what it holds.
	m = NewMemStore(1, MemStoreConfig{ChunkRows: r})
	for i := range r {
		c = Chunk{N: 1, D: 1, X: []float64{1}}
		c.Keys.Append(bytes.Repeat([]byte{'k'}, 1+100*i))
		m.Append(&c)
	}
	keyBytes := int64(1 + 101 + 201 + 301)
	if want := int64(r*8) + keyBytes + int64(r*8); m.Bytes() != want {
		t.Fatalf("full chunk of growing keys: %d bytes, want %d", m.Bytes(), want)
	}
}

// TestMemStoreTransform scales the features in place, chunk by chunk.
func TestMemStoreTransform(t *testing.T) {
	keys, x := spillRows(50, 2, 3, false, false)
	m := NewMemStore(2, MemStoreConfig{ChunkRows: 8})
	memRows(m, keys, x, 2, []int{13})
	calls := 0
	m.Transform(func(rows []float64) {
		calls++
		for i := range rows {
			rows[i] = 2*rows[i] + 1
		}
	})
	if calls != 7 {
		t.Fatalf("Transform called fn %d times, want one per chunk, 7", calls)
	}
	for c := range m.Chunks() {
		rows, first, _ := m.Chunk(c, nil)
		for i, v := range rows {
			if want := 2*x[first*2+i] + 1; v != want {
				t.Fatalf("chunk %d value %d: %v, want %v", c, i, v, want)
			}
		}
	}
	if x[0] == 2*x[0]+1 {
		t.Fatal("the appended rows were not copied")
	}
}

// TestMemStoreDrain moves the rows into a Spill: the spill then holds the
// same chunks and the store nothing; a failure stops the move and still
// empties the store.
func TestMemStoreDrain(t *testing.T) {
	const n, d, r = 1000, 3, 64
	keys, x := spillRows(n, d, 5, false, false)
	m := NewMemStore(d, MemStoreConfig{ChunkRows: r})
	memRows(m, keys, x, d, []int{100})
	sp, err := CreateSpill(t.TempDir(), d, SpillConfig{ChunkRows: r})
	if err != nil {
		t.Fatal(err)
	}
	defer sp.Remove()
	var firsts []int64
	err = m.Drain(func(c *Chunk) error {
		firsts = append(firsts, c.First)
		return sp.Append(c)
	})
	if err != nil {
		t.Fatal(err)
	}
	if m.Len() != 0 || m.Chunks() != 0 || m.Bytes() != 0 {
		t.Fatalf("after Drain: Len %d, Chunks %d, Bytes %d; want all 0", m.Len(), m.Chunks(), m.Bytes())
	}
	if len(firsts) != 16 || firsts[1] != r || firsts[15] != 15*r {
		t.Fatalf("Drain gave chunks starting at %v, want 0, 64, ..., 960", firsts)
	}
	if err := sp.Finish(); err != nil {
		t.Fatal(err)
	}
	checkSpill(t, sp, keys, x, d, r, false)

	m = NewMemStore(d, MemStoreConfig{ChunkRows: r})
	memRows(m, keys, x, d, []int{n})
	stop := errors.New("disk full")
	calls := 0
	err = m.Drain(func(*Chunk) error {
		calls++
		if calls == 3 {
			return stop
		}
		return nil
	})
	if !errors.Is(err, stop) || calls != 3 {
		t.Fatalf("Drain: error %v after %d calls, want %v after 3", err, calls, stop)
	}
	if m.Len() != 0 || m.Bytes() != 0 {
		t.Fatalf("after a failed Drain: Len %d, Bytes %d; want 0", m.Len(), m.Bytes())
	}
}

// TestMemStoreMisuse checks the panics of programmer errors.
func TestMemStoreMisuse(t *testing.T) {
	cases := []struct {
		name string
		fn   func()
		msg  string
	}{
		{"no features", func() { NewMemStore(0, MemStoreConfig{}) }, "memory store of 0 features"},
		{"negative chunk rows", func() { NewMemStore(2, MemStoreConfig{ChunkRows: -1}) }, "chunks of -1 rows"},
		{"wrong width", func() {
			c := Chunk{N: 1, D: 3, X: []float64{1, 2, 3}}
			c.Keys.Append([]byte{1})
			NewMemStore(2, MemStoreConfig{}).Append(&c)
		}, "3 features"},
		{"keys missing", func() { NewMemStore(1, MemStoreConfig{}).Append(&Chunk{N: 1, D: 1, X: []float64{1}}) }, "0 keys"},
		{"chunk out of range", func() { NewMemStore(1, MemStoreConfig{}).Chunk(0, nil) }, "chunk 0 out of range"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			defer func() {
				r := recover()
				s, _ := r.(string)
				if !strings.HasPrefix(s, "dbio: ") || !strings.Contains(s, c.msg) {
					t.Fatalf("panic %v, want a dbio: panic naming %q", r, c.msg)
				}
			}()
			c.fn()
		})
	}
}
