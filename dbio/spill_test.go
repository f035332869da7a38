package dbio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
	"syscall"
	"testing"
)

// spillRows makes n rows of d features and their keys from a fixed seed.
// Key lengths run from 0 to 300 bytes, so that both one- and two-byte
// length prefixes occur, and with big set one key is longer than the
// write buffer. Features span many magnitudes and signs; with wide set
// they include values that only float64 holds (beyond float32's range,
// and subnormal).
func spillRows(n, d int, seed uint64, wide, big bool) (Keys, []float64) {
	rng := rand.New(rand.NewPCG(seed, 1))
	var keys Keys
	key := make([]byte, 0, 2*spillBufSize)
	for i := range n {
		l := rng.IntN(301)
		if big && i == n/2 {
			l = spillBufSize + 17
		}
		key = key[:0]
		for range l {
			key = append(key, byte(rng.Uint32()))
		}
		keys.Append(key)
	}
	x := make([]float64, n*d)
	for i := range x {
		v := rng.NormFloat64() * math.Pow(10, float64(rng.IntN(41)-20))
		switch rng.IntN(50) {
		case 0:
			v = 0
		case 1:
			v = math.MaxFloat32
		case 2:
			v = -math.SmallestNonzeroFloat32
		case 3:
			if wide {
				v = 1e300
			}
		case 4:
			if wide {
				v = 5e-324 // the smallest subnormal float64
			}
		}
		x[i] = v
	}
	return keys, x
}

// appendRows appends the rows to s in chunks whose sizes cycle through
// sizes, numbering rows from 0 in Chunk.First.
func appendRows(t testing.TB, s *Spill, keys Keys, x []float64, d int, sizes []int) {
	t.Helper()
	n := keys.Len()
	for lo, j := 0, 0; lo < n; j++ {
		hi := min(lo+sizes[j%len(sizes)], n)
		c := Chunk{N: hi - lo, D: d, X: x[lo*d : hi*d], First: int64(lo)}
		for i := lo; i < hi; i++ {
			c.Keys.Append(keys.At(i))
		}
		if err := s.Append(&c); err != nil {
			t.Fatalf("append rows [%d, %d): %v", lo, hi, err)
		}
		lo = hi
	}
}

// sameFeature reports whether got is what a spill returns for want: want
// itself in float64, and in float32 want rounded to the nearest float32.
// The float32 check also holds got to the bound IEEE 754 sets on that
// rounding (binary32 has a 24-bit significand, so the error is at most
// 2⁻²⁴·|want| for normal numbers and half the smallest subnormal, 2⁻¹⁵⁰,
// below them; common practice) and to being a float32 value.
func sameFeature(got, want float64, f32 bool) bool {
	if !f32 {
		return math.Float64bits(got) == math.Float64bits(want)
	}
	bound := max(math.Abs(want)*0x1p-24, 0x1p-150)
	return got == float64(float32(want)) &&
		float64(float32(got)) == got &&
		math.Abs(got-want) <= bound
}

// checkSpill reads every chunk of s, features and keys, and compares them
// with the rows appended.
func checkSpill(t *testing.T, s *Spill, keys Keys, x []float64, d, rows int, f32 bool) {
	t.Helper()
	n := keys.Len()
	if s.Len() != n || s.Dim() != d {
		t.Fatalf("Len, Dim = %d, %d, want %d, %d", s.Len(), s.Dim(), n, d)
	}
	if want := (n + rows - 1) / rows; s.Chunks() != want {
		t.Fatalf("Chunks = %d, want %d", s.Chunks(), want)
	}
	var buf []float64
	for c := range s.Chunks() {
		got, first, err := s.Chunk(c, buf)
		if err != nil {
			t.Fatalf("Chunk(%d): %v", c, err)
		}
		if cap(got) > cap(buf) {
			buf = got[:0]
		}
		m := min(rows, n-c*rows)
		if first != c*rows || len(got) != m*d {
			t.Fatalf("Chunk(%d): first %d, %d values; want %d, %d", c, first, len(got), c*rows, m*d)
		}
		for i, v := range got {
			if want := x[first*d+i]; !sameFeature(v, want, f32) {
				t.Fatalf("Chunk(%d): row %d feature %d = %v, want %v", c, first+i/d, i%d, v, want)
			}
		}

		dst := Keys{}
		dst.Append([]byte("already there"))
		if err := s.ChunkKeys(c, &dst); err != nil {
			t.Fatalf("ChunkKeys(%d): %v", c, err)
		}
		if dst.Len() != 1+m || string(dst.At(0)) != "already there" {
			t.Fatalf("ChunkKeys(%d): %d keys, first %q; want %d, %q", c, dst.Len(), dst.At(0), 1+m, "already there")
		}
		for i := range m {
			if !bytes.Equal(dst.At(1+i), keys.At(first+i)) {
				t.Fatalf("ChunkKeys(%d): key of row %d = %x, want %x", c, first+i, dst.At(1+i), keys.At(first+i))
			}
		}
	}
}

// spillSize is the size of n rows' data in a spill, worked out from the
// layout: w bytes per feature, and per key its length as a varint and its
// bytes.
func spillSize(keys Keys, d, w int) int64 {
	size := int64(keys.Len() * d * w)
	for i := range keys.Len() {
		size += int64(len(binary.AppendUvarint(nil, uint64(len(keys.At(i))))) + len(keys.At(i)))
	}
	return size
}

// openSpillFiles lists the files under path that the process holds open,
// from /proc/self/fd; ok is false where there is no /proc.
func openSpillFiles(t *testing.T, path string) (names []string, ok bool) {
	t.Helper()
	if runtime.GOOS != "linux" {
		return nil, false
	}
	fds, err := os.ReadDir("/proc/self/fd")
	if err != nil {
		t.Fatalf("list open files: %v", err)
	}
	for _, fd := range fds {
		target, err := os.Readlink(filepath.Join("/proc/self/fd", fd.Name()))
		if err == nil && strings.HasPrefix(target, path+".") {
			names = append(names, target)
		}
	}
	return names, true
}

// checkGone checks that no file of s is left in its directory or held
// open.
func checkGone(t *testing.T, s *Spill, dir string) {
	t.Helper()
	if entries, err := os.ReadDir(dir); err != nil || len(entries) != 0 {
		t.Fatalf("directory after removal: %v, %v; want it empty", entries, err)
	}
	if open, ok := openSpillFiles(t, s.Path()); ok && len(open) != 0 {
		t.Fatalf("files still open after removal: %q", open)
	}
}

func TestSpillRoundTrip(t *testing.T) {
	tests := []struct {
		name      string
		n, d      int
		chunkRows int   // SpillConfig.ChunkRows
		rows      int   // the chunk size it means
		float32   bool  // SpillConfig.Float32
		sizes     []int // sizes of the chunks appended
		big       bool  // a key longer than the write buffer
	}{
		{"one row per chunk", 50, 3, 1, 1, false, []int{7}, false},
		{"seven rows per chunk", 100, 2, 7, 7, false, []int{1, 13, 4}, false},
		{"seven rows per chunk in float32", 100, 5, 7, 7, true, []int{33}, false},
		{"default chunks, not dividing evenly", 2*65536 + 5, 3, 0, 65536, false, []int{4096, 999}, false},
		{"65536 rows per chunk in float32", 65536 + 1, 2, 65536, 65536, true, []int{10000}, false},
		{"fewer rows than a chunk", 5, 1, 65536, 65536, false, []int{2}, false},
		{"no rows", 0, 4, 7, 7, false, []int{1}, false},
		{"rows and a key wider than the buffer", 5, 40000, 2, 2, false, []int{3}, true},
	}
	for i, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			dir := t.TempDir()
			keys, x := spillRows(tt.n, tt.d, uint64(i), !tt.float32, tt.big)
			s, err := CreateSpill(dir, tt.d, SpillConfig{Float32: tt.float32, ChunkRows: tt.chunkRows})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Remove()
			if runtime.GOOS != "windows" {
				// Unlinked at creation (see Spill): nothing to see, two
				// files held open.
				if entries, _ := os.ReadDir(dir); len(entries) != 0 {
					t.Fatalf("directory holds %v after CreateSpill, want nothing", entries)
				}
				if open, ok := openSpillFiles(t, s.Path()); ok && len(open) != 2 {
					t.Fatalf("open spill files %q, want 2", open)
				}
			}
			appendRows(t, s, keys, x, tt.d, tt.sizes)
			if err := s.Finish(); err != nil {
				t.Fatal(err)
			}
			if err := s.Finish(); err != nil {
				t.Fatalf("second Finish: %v", err)
			}
			w := 8
			if tt.float32 {
				w = 4
			}
			want := spillSize(keys, tt.d, w)
			if s.Bytes() != want {
				t.Fatalf("Bytes = %d, want %d", s.Bytes(), want)
			}
			var onDisk int64
			for _, f := range []*os.File{s.x, s.k} {
				st, err := f.Stat()
				if err != nil {
					t.Fatal(err)
				}
				onDisk += st.Size()
			}
			if onDisk != want {
				t.Fatalf("files hold %d bytes, want %d", onDisk, want)
			}
			checkSpill(t, s, keys, x, tt.d, tt.rows, tt.float32)
			// A second pass reads the same.
			checkSpill(t, s, keys, x, tt.d, tt.rows, tt.float32)
			if err := s.Remove(); err != nil {
				t.Fatal(err)
			}
			checkGone(t, s, dir)
		})
	}
}

// TestSpillConcurrent reads every chunk from several goroutines at once,
// each in its own order; run it with -race.
func TestSpillConcurrent(t *testing.T) {
	const n, d, rows, readers = 10007, 4, 64, 8
	for _, f32 := range []bool{false, true} {
		t.Run(fmt.Sprintf("float32=%v", f32), func(t *testing.T) {
			keys, x := spillRows(n, d, 7, !f32, false)
			s, err := CreateSpill(t.TempDir(), d, SpillConfig{Float32: f32, ChunkRows: rows})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Remove()
			appendRows(t, s, keys, x, d, []int{1000})
			if err := s.Finish(); err != nil {
				t.Fatal(err)
			}
			var wg sync.WaitGroup
			for r := range readers {
				wg.Go(func() {
					order := rand.New(rand.NewPCG(uint64(r), 2)).Perm(s.Chunks())
					var buf []float64
					var dst Keys
					for _, c := range order {
						got, first, err := s.Chunk(c, buf)
						if err != nil {
							t.Errorf("reader %d: %v", r, err)
							return
						}
						buf = got[:0]
						for i, v := range got {
							if !sameFeature(v, x[first*d+i], f32) {
								t.Errorf("reader %d: chunk %d value %d = %v, want %v", r, c, i, v, x[first*d+i])
								return
							}
						}
						dst.Reset()
						if err := s.ChunkKeys(c, &dst); err != nil {
							t.Errorf("reader %d: %v", r, err)
							return
						}
						for i := range dst.Len() {
							if !bytes.Equal(dst.At(i), keys.At(first+i)) {
								t.Errorf("reader %d: chunk %d key %d = %x, want %x", r, c, i, dst.At(i), keys.At(first+i))
								return
							}
						}
					}
				})
			}
			wg.Wait()
		})
	}
}

// TestSpillRemoveWhileReading removes a spill while goroutines read it, as
// a cancellation does: the readers stop with an error, without a panic.
func TestSpillRemoveWhileReading(t *testing.T) {
	const n, d = 5000, 3
	keys, x := spillRows(n, d, 11, true, false)
	dir := t.TempDir()
	s, err := CreateSpill(dir, d, SpillConfig{ChunkRows: 16})
	if err != nil {
		t.Fatal(err)
	}
	appendRows(t, s, keys, x, d, []int{512})
	if err := s.Finish(); err != nil {
		t.Fatal(err)
	}
	var wg sync.WaitGroup
	started := make(chan struct{}, 2)
	errs := make([]error, 2)
	for r := range errs {
		wg.Go(func() {
			var buf []float64
			var dst Keys
			for i := 0; ; i++ {
				c := i % s.Chunks()
				rows, _, err := s.Chunk(c, buf)
				if err == nil {
					buf = rows[:0]
					dst.Reset()
					err = s.ChunkKeys(c, &dst)
				}
				if err != nil {
					errs[r] = err
					return
				}
				if i == 0 {
					started <- struct{}{}
				}
			}
		})
	}
	<-started
	<-started
	var removers sync.WaitGroup
	for range 2 {
		removers.Go(func() {
			if err := s.Remove(); err != nil {
				t.Errorf("Remove: %v", err)
			}
		})
	}
	removers.Wait()
	wg.Wait()
	for r, err := range errs {
		// A read that began before the removal sees the closed file.
		if !errors.Is(err, errSpillRemoved) && !errors.Is(err, os.ErrClosed) {
			t.Errorf("reader %d stopped with %v, want a removed spill or a closed file", r, err)
		}
	}
	checkGone(t, s, dir)
}

func TestSpillRemove(t *testing.T) {
	const d = 2
	keys, x := spillRows(10, d, 3, true, false)
	tests := []struct {
		name     string
		finished bool // Finish before Remove
	}{
		{"while writing", false},
		{"after finish", true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			dir := t.TempDir()
			s, err := CreateSpill(dir, d, SpillConfig{ChunkRows: 4})
			if err != nil {
				t.Fatal(err)
			}
			appendRows(t, s, keys, x, d, []int{3})
			if tt.finished {
				if err := s.Finish(); err != nil {
					t.Fatal(err)
				}
			}
			for i := range 3 {
				if err := s.Remove(); err != nil {
					t.Fatalf("Remove #%d: %v", i+1, err)
				}
			}
			checkGone(t, s, dir)

			removed := func(step string, err error) {
				t.Helper()
				if !errors.Is(err, errSpillRemoved) || !strings.Contains(err.Error(), ": spill removed") {
					t.Fatalf("%s after Remove: %v, want a removed spill", step, err)
				}
			}
			c := Chunk{N: 1, D: d, X: x[:d]}
			c.Keys.Append(keys.At(0))
			removed("Append", s.Append(&c))
			removed("Finish", s.Finish())
			_, _, err = s.Chunk(0, nil)
			removed("Chunk", err)
			removed("ChunkKeys", s.ChunkKeys(0, &Keys{}))
			if want := "read spill chunk 0: spill removed"; err.Error() != want {
				t.Fatalf("Chunk after Remove: %q, want %q", err, want)
			}
		})
	}
}

func TestCreateSpillDirectory(t *testing.T) {
	root := t.TempDir()
	file := filepath.Join(root, "file")
	if err := os.WriteFile(file, []byte("not a directory"), 0o600); err != nil {
		t.Fatal(err)
	}
	// Root may write anywhere, so a read-only directory would not fail;
	// a directory under a regular file, or one that does not exist, fails
	// for everyone.
	tests := []struct {
		name     string
		dir, cfg string // CreateSpill's dir and SpillConfig.Dir
		where    string // the directory the error names
		cause    error
	}{
		{"under a regular file", file + "/sub", "", file + "/sub", syscall.ENOTDIR},
		{"missing", root + "/missing", "", root + "/missing", fs.ErrNotExist},
		{"missing, from the config", "", root + "/missing", root + "/missing", fs.ErrNotExist},
		{"argument before config", file + "/sub", root, file + "/sub", syscall.ENOTDIR},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			s, err := CreateSpill(tt.dir, 3, SpillConfig{Dir: tt.cfg})
			if err == nil {
				s.Remove()
				t.Fatalf("CreateSpill in %q made %s, want an error", tt.where, s.Path())
			}
			prefix := fmt.Sprintf("create spill in directory %q: open %s/assort-spill-", tt.where, tt.where)
			if !strings.HasPrefix(err.Error(), prefix) || !errors.Is(err, tt.cause) {
				t.Fatalf("error %q, want it to begin %q and wrap %v", err, prefix, tt.cause)
			}
		})
	}
}

func TestCreateSpillDefaultDirectory(t *testing.T) {
	tmp, cfgDir, argDir := t.TempDir(), t.TempDir(), t.TempDir()
	t.Setenv("TMPDIR", tmp) // os.TempDir on Unix
	if runtime.GOOS == "windows" {
		t.Setenv("TMP", tmp)
	}
	tests := []struct {
		name, dir, cfg, want string
	}{
		{"argument", argDir, cfgDir, argDir},
		{"config", "", cfgDir, cfgDir},
		{"temporary directory", "", "", tmp},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			s, err := CreateSpill(tt.dir, 1, SpillConfig{Dir: tt.cfg})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Remove()
			if got := filepath.Dir(s.Path()); got != tt.want {
				t.Fatalf("spill in %q, want %q", got, tt.want)
			}
		})
	}
}

// diskFull passes writes on to its file until budget bytes, shared by all
// the files it wraps as on one disk, have been written, and then fails
// them as a full disk does, with the file's name and err.
type diskFull struct {
	f      *os.File
	budget *int64
	err    error
}

func (w *diskFull) Write(p []byte) (int, error) {
	n := int(min(int64(len(p)), *w.budget))
	n, err := w.f.Write(p[:n])
	*w.budget -= int64(n)
	if err == nil && n < len(p) {
		err = &fs.PathError{Op: "write", Path: w.f.Name(), Err: w.err}
	}
	return n, err
}

// TestSpillWriteFailure makes the disk fail under a spill through
// createSpill's hook: a full disk (ENOSPC), as a small tmpfs would give,
// and another failure.
func TestSpillWriteFailure(t *testing.T) {
	tests := []struct {
		name   string
		n      int
		budget int64 // bytes the disk takes
		cause  error
		step   string // the failing step and the file it fails on
		file   string
		full   bool // the message says the disk is full
	}{
		// Keys (about 150 bytes a row) fill their buffer before the
		// features (16 bytes a row).
		{"full during append", 100000, 1000, syscall.ENOSPC, "append to spill", ".keys", true},
		// 100 rows fit the buffers; Finish writes the features (1600
		// bytes), then fails on the keys (about 15000).
		{"full during finish", 100, 5000, syscall.ENOSPC, "finish spill", ".keys", true},
		{"disk fails", 100000, 1000, syscall.EIO, "append to spill", ".keys", false},
	}
	const d = 2
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			dir := t.TempDir()
			budget := tt.budget
			s, err := createSpill(dir, d, SpillConfig{}, func(w io.Writer) io.Writer {
				return &diskFull{f: w.(*os.File), budget: &budget, err: tt.cause}
			})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Remove()
			keys, x := spillRows(tt.n, d, 5, true, false)
			c := Chunk{N: tt.n, D: d, X: x, Keys: keys}
			err = s.Append(&c)
			if err == nil {
				err = s.Finish()
			}
			if err == nil {
				t.Fatal("the spill was written, want a failure")
			}
			want := fmt.Sprintf("%s: write %s%s: %v", tt.step, s.Path(), tt.file, tt.cause)
			if tt.full {
				want = fmt.Sprintf("%s: spill disk full in directory %q after %d bytes (%s) were written: write %s%s: no space left on device",
					tt.step, dir, tt.budget, FormatSize(tt.budget), s.Path(), tt.file)
			}
			if err.Error() != want || !errors.Is(err, tt.cause) {
				t.Fatalf("error\n got %q\nwant %q, wrapping %v", err, want, tt.cause)
			}
			checkGone(t, s, dir)
			// The error is final.
			if err2 := s.Append(&c); err2 != err {
				t.Fatalf("Append after the failure: %v, want %v", err2, err)
			}
			if err2 := s.Finish(); err2 != err {
				t.Fatalf("Finish after the failure: %v, want %v", err2, err)
			}
			if err := s.Remove(); err != nil {
				t.Fatalf("Remove after the failure: %v", err)
			}
		})
	}
}

func TestSpillFloat32Range(t *testing.T) {
	tests := []struct {
		name string
		v    float64
		msg  string // "" when the value fits
	}{
		{"largest float32", math.MaxFloat32, ""},
		{"most negative float32", -math.MaxFloat32, ""},
		{"too large", 1e39, "append to spill: row 13, feature 2: 1e+39 is beyond float32's range (±3.4028234663852886e+38); spill float64 instead"},
		{"too negative", -1e39, "append to spill: row 13, feature 2: -1e+39 is beyond float32's range (±3.4028234663852886e+38); spill float64 instead"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			dir := t.TempDir()
			s, err := CreateSpill(dir, 2, SpillConfig{Float32: true})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Remove()
			c := Chunk{N: 4, D: 2, X: []float64{1, 2, 3, 4, 5, 6, 7, tt.v}, First: 9}
			for _, k := range []string{"a", "b", "c", "d"} {
				c.Keys.Append([]byte(k))
			}
			err = s.Append(&c)
			if tt.msg == "" {
				if err != nil {
					t.Fatal(err)
				}
				if err := s.Finish(); err != nil {
					t.Fatal(err)
				}
				got, _, err := s.Chunk(0, nil)
				if err != nil || got[7] != tt.v {
					t.Fatalf("Chunk: %v, %v; want the last value %v", got, err, tt.v)
				}
				return
			}
			if err == nil || err.Error() != tt.msg {
				t.Fatalf("Append: %v, want %q", err, tt.msg)
			}
			checkGone(t, s, dir)
		})
	}
}

func TestSpillKeysMalformed(t *testing.T) {
	keys, x := spillRows(20, 1, 9, true, false)
	s, err := CreateSpill(t.TempDir(), 1, SpillConfig{ChunkRows: 8})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Remove()
	appendRows(t, s, keys, x, 1, []int{20})
	if err := s.Finish(); err != nil {
		t.Fatal(err)
	}
	// Overwrite chunk 1's first length with a varint longer than 64 bits.
	at := s.keyOff[1]
	if _, err := s.k.WriteAt(bytes.Repeat([]byte{0xff}, 10), at); err != nil {
		t.Fatal(err)
	}
	dst := Keys{}
	dst.Append([]byte("kept"))
	err = s.ChunkKeys(1, &dst)
	want := fmt.Sprintf("read keys of spill chunk 1: malformed key length at byte %d of %s.keys", at, s.Path())
	if err == nil || err.Error() != want {
		t.Fatalf("ChunkKeys: %v, want %q", err, want)
	}
	if dst.Len() != 1 || len(dst.Data) != 4 || string(dst.At(0)) != "kept" {
		t.Fatalf("dst after the error: %q %v, want it as it was", dst.Data, dst.End)
	}
	// The other chunks still read.
	if err := s.ChunkKeys(0, &dst); err != nil || dst.Len() != 9 {
		t.Fatalf("ChunkKeys(0): %v, %d keys; want 9", err, dst.Len())
	}
}

func TestSpillMisuse(t *testing.T) {
	dir := t.TempDir()
	open := func(finished bool) *Spill {
		s, err := CreateSpill(dir, 2, SpillConfig{ChunkRows: 2})
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() {
			if err := s.Remove(); err != nil {
				t.Error(err)
			}
		})
		c := Chunk{N: 3, D: 2, X: make([]float64, 6)}
		for range 3 {
			c.Keys.Append([]byte("k"))
		}
		if err := s.Append(&c); err != nil {
			t.Fatal(err)
		}
		if finished {
			if err := s.Finish(); err != nil {
				t.Fatal(err)
			}
		}
		return s
	}
	tests := []struct {
		name string
		call func()
		want string
	}{
		{"no features", func() { CreateSpill(dir, 0, SpillConfig{}) }, "dbio: spill of 0 features"},
		{"negative chunk rows", func() { CreateSpill(dir, 1, SpillConfig{ChunkRows: -1}) }, "dbio: spill chunks of -1 rows"},
		{"wrong number of features", func() {
			c := Chunk{N: 1, D: 3, X: make([]float64, 3)}
			c.Keys.Append(nil)
			open(false).Append(&c)
		}, "dbio: Spill.Append of a chunk of 1 rows, 3 features, 3 values and 1 keys to a spill of 2 features"},
		{"a key missing", func() {
			c := Chunk{N: 2, D: 2, X: make([]float64, 4)}
			c.Keys.Append(nil)
			open(false).Append(&c)
		}, "dbio: Spill.Append of a chunk of 2 rows, 2 features, 4 values and 1 keys to a spill of 2 features"},
		{"append after finish", func() { open(true).Append(&Chunk{D: 2}) }, "dbio: Spill written to after Finish"},
		{"chunk before finish", func() { open(false).Chunk(0, nil) }, "dbio: Spill read before Finish"},
		{"keys before finish", func() { open(false).ChunkKeys(0, &Keys{}) }, "dbio: Spill read before Finish"},
		{"chunk past the end", func() { open(true).Chunk(2, nil) }, "dbio: spill chunk 2 out of range [0, 2)"},
		{"negative chunk", func() { open(true).ChunkKeys(-1, &Keys{}) }, "dbio: spill chunk -1 out of range [0, 2)"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			defer func() {
				if got := recover(); got != tt.want {
					t.Fatalf("panic %v, want %q", got, tt.want)
				}
			}()
			tt.call()
		})
	}
}

// BenchmarkSpillChunk reads 10⁶ rows of 8 features from a spill, chunk by
// chunk, by one reader and by two sharing the chunks, and their keys. Bytes
// are those of the float64 features delivered, so MB/s compares the two
// widths on what the numerics receive. The baseline "pread" reads the
// features file without decoding it; the files stay in the page cache.
func BenchmarkSpillChunk(b *testing.B) {
	const n, d = 1_000_000, 8
	// Keys of 8 bytes, as a bigint's are.
	var keys Keys
	for i := range n {
		keys.Append(binary.BigEndian.AppendUint64(nil, uint64(i)))
	}
	rng := rand.New(rand.NewPCG(1, 1))
	x := make([]float64, n*d)
	for i := range x {
		x[i] = rng.NormFloat64()
	}
	for _, f32 := range []bool{false, true} {
		s, err := CreateSpill(b.TempDir(), d, SpillConfig{Float32: f32})
		if err != nil {
			b.Fatal(err)
		}
		appendRows(b, s, keys, x, d, []int{DefaultSpillChunkRows})
		if err := s.Finish(); err != nil {
			b.Fatal(err)
		}
		for _, readers := range []int{1, 2} {
			b.Run(fmt.Sprintf("float32=%v/readers=%d", f32, readers), func(b *testing.B) {
				b.SetBytes(n * d * 8)
				for b.Loop() {
					var wg sync.WaitGroup
					for r := range readers {
						wg.Go(func() {
							var buf []float64
							for c := r; c < s.Chunks(); c += readers {
								rows, _, err := s.Chunk(c, buf)
								if err != nil {
									b.Error(err)
									return
								}
								buf = rows[:0]
							}
						})
					}
					wg.Wait()
				}
				b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
			})
		}
		// The baseline: the same file read into bytes, with no decoding,
		// in pieces of a float64 chunk's size.
		b.Run(fmt.Sprintf("float32=%v/pread", f32), func(b *testing.B) {
			b.SetBytes(n * d * 8)
			raw := make([]byte, DefaultSpillChunkRows*d*8)
			size := int64(n * d * s.width)
			for b.Loop() {
				for off := int64(0); off < size; off += int64(len(raw)) {
					m := min(int64(len(raw)), size-off)
					if _, err := s.x.ReadAt(raw[:m], off); err != nil {
						b.Fatal(err)
					}
				}
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
		})
		b.Run(fmt.Sprintf("float32=%v/keys", f32), func(b *testing.B) {
			var dst Keys
			for b.Loop() {
				for c := range s.Chunks() {
					dst.Reset()
					if err := s.ChunkKeys(c, &dst); err != nil {
						b.Fatal(err)
					}
				}
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
		})
		if err := s.Remove(); err != nil {
			b.Fatal(err)
		}
	}
}
