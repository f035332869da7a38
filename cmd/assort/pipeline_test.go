package main

import (
	"bytes"
	"context"
	"errors"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"assort/dbio"
)

// seqFeed is a feed of batches whose one feature is the batch's position,
// failing at batch failAt (when ≥ 0). It counts the batches handed out and
// not yet released, through inFlight, which the test's consumer lowers.
type seqFeed struct {
	n, failAt int
	pos       int
	inFlight  *atomic.Int64
	maxFlight *atomic.Int64
	closed    atomic.Bool
}

var errSeqFeed = errors.New("feed failed")

func (f *seqFeed) next(b *batch) (bool, error) {
	if f.pos == f.failAt {
		return false, errSeqFeed
	}
	if f.pos == f.n {
		return false, nil
	}
	b.n = 1 + f.pos%storeChunkRows
	b.x = make([]float64, b.n)
	for i := range b.x {
		b.x[i] = float64(f.pos)
	}
	f.pos++
	v := f.inFlight.Add(1)
	for {
		m := f.maxFlight.Load()
		if v <= m || f.maxFlight.CompareAndSwap(m, v) {
			break
		}
	}
	return true, nil
}

func (f *seqFeed) close() error {
	f.closed.Store(true)
	return nil
}

// TestPipelineOrder runs the pipeline with workers that take random times
// and checks that the consumer gets every batch once, in the feed's order,
// with the workers' outputs, and that no more than 2W batches are ever out
// of the pool (the bound the memory plan counts on).
func TestPipelineOrder(t *testing.T) {
	cases := []struct {
		name    string
		n       int
		workers int
	}{
		{"one worker", 50, 1},
		{"two workers", 200, 2},
		{"eight workers", 500, 8},
		{"no batches", 0, 3},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var inFlight, maxFlight atomic.Int64
			feed := &seqFeed{n: c.n, failAt: -1, inFlight: &inFlight, maxFlight: &maxFlight}
			var seed atomic.Uint64
			work := func(b *batch, _ []float64) {
				rng := rand.New(rand.NewPCG(seed.Add(1), 7))
				time.Sleep(time.Duration(rng.IntN(300)) * time.Microsecond)
				b.outputs(1, false)
				for i := range b.n {
					b.dist[i] = 2 * b.x[i]
				}
			}
			p, err := startPipeline(context.Background(), func(context.Context) (rowFeed, error) { return feed, nil }, c.workers, 1, work)
			if err != nil {
				t.Fatal(err)
			}
			for want := 0; ; want++ {
				b, err := p.next()
				if err != nil {
					t.Fatal(err)
				}
				if b == nil {
					if want != c.n {
						t.Fatalf("pass ended after %d batches, want %d", want, c.n)
					}
					break
				}
				if b.seq != want || b.n != 1+want%storeChunkRows || b.x[0] != float64(want) || b.dist[b.n-1] != 2*float64(want) {
					t.Fatalf("batch %d: seq %d, %d rows, feature %v, output %v", want, b.seq, b.n, b.x[0], b.dist[b.n-1])
				}
				inFlight.Add(-1)
				p.release(b)
			}
			if err := p.stop(); err != nil {
				t.Fatal(err)
			}
			if got := maxFlight.Load(); got > int64(2*c.workers) {
				t.Errorf("%d batches out of the pool at once, want at most 2W = %d", got, 2*c.workers)
			}
			if !feed.closed.Load() {
				t.Error("the feed was not closed")
			}
		})
	}
}

// TestPipelineStops checks the ends that are not a clean end of the
// rows: a feed that fails (the consumer gets its error, after the batches
// before it or instead of them), a consumer that stops early, and a
// cancelled context. In each case stop returns and the feed is closed.
func TestPipelineStops(t *testing.T) {
	work := func(b *batch, _ []float64) { b.outputs(1, false) }
	cases := []struct {
		name    string
		failAt  int
		take    int // batches the consumer takes before stopping; -1: all
		cancel  bool
		wantErr error
	}{
		{"feed fails", 7, -1, false, errSeqFeed},
		{"feed fails at once", 0, -1, false, errSeqFeed},
		{"consumer stops", -1, 3, false, nil},
		{"context cancelled", -1, 2, true, context.Canceled},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var inFlight, maxFlight atomic.Int64
			feed := &seqFeed{n: 1000, failAt: c.failAt, inFlight: &inFlight, maxFlight: &maxFlight}
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			p, err := startPipeline(ctx, func(context.Context) (rowFeed, error) { return feed, nil }, 4, 1, work)
			if err != nil {
				t.Fatal(err)
			}
			var got error
			for i := 0; c.take < 0 || i < c.take; i++ {
				b, err := p.next()
				if err != nil || b == nil {
					got = err
					break
				}
				if c.failAt >= 0 && b.seq >= c.failAt {
					t.Fatalf("got batch %d from a feed that failed at %d", b.seq, c.failAt)
				}
				p.release(b)
			}
			if c.cancel {
				cancel()
				_, got = p.next()
				for got == nil {
					_, got = p.next()
				}
			}
			done := make(chan struct{})
			go func() { p.stop(); close(done) }()
			select {
			case <-done:
			case <-time.After(10 * time.Second):
				t.Fatal("stop did not return within 10 s")
			}
			if !errors.Is(got, c.wantErr) {
				t.Errorf("error %v, want %v", got, c.wantErr)
			}
			if !feed.closed.Load() {
				t.Error("the feed was not closed")
			}
		})
	}
}

// spillLinks lists the process's open files (/proc/PID/fd, Linux) that
// are spill files in dir: a spill is unlinked at creation, so its files
// show there, marked "(deleted)", and nowhere in dir.
func spillLinks(t *testing.T, pid, dir string) []string {
	t.Helper()
	fds, err := os.ReadDir(filepath.Join("/proc", pid, "fd"))
	if err != nil {
		t.Fatalf("list the open files of process %s: %v", pid, err)
	}
	var out []string
	for _, fd := range fds {
		target, err := os.Readlink(filepath.Join("/proc", pid, "fd", fd.Name()))
		if err == nil && strings.HasPrefix(target, filepath.Join(dir, "assort-spill-")) {
			out = append(out, target)
		}
	}
	return out
}

// emptyDir fails the test unless dir has no entries.
func emptyDir(t *testing.T, dir, when string) {
	t.Helper()
	entries, err := os.ReadDir(dir)
	if err != nil || len(entries) != 0 {
		t.Errorf("%s: spill directory holds %v (%v); want nothing", when, entries, err)
	}
}

// TestSpillRemoved checks that a spill leaves nothing behind: after a
// successful run, after a run that fails once it has spilled (a duplicate
// key, found when the results are indexed), and after SIGINT while a real
// process is paused at the fit with its rows spilled. A spill's files are
// unlinked as soon as they are created, so the directory stays empty even
// while they are in use; what shows they exist is the process's open
// descriptors, and what shows they are gone is that none is left.
func TestSpillRemoved(t *testing.T) {
	w := newWorkspace(t)
	w.overlapping(t, "src", 30000)
	w.exec(t, "CREATE TABLE "+w.table("dups")+" AS SELECT * FROM "+w.table("src")+" ORDER BY id")
	w.exec(t, "INSERT INTO "+w.table("dups")+" VALUES (29999, 1, 2, 3, 4)")
	self := "self"
	cases := []struct {
		name string
		from string
		code int
		msg  string
	}{
		{"success", "src", exitOK, "spilled 30000 rows"},
		{"duplicate key after spilling", "dups", exitFailure, `key column "id" is not unique`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			code, _, stderr := assort(t, "fit", "sp", "--query", "SELECT id, f1, f2, f3, f4 FROM "+w.table(c.from), "--key", "id", "--k", "3",
				"--memory", "5MiB", "--workers", "2", "--spill-dir", dir, "-d", w.url, "--schema", w.schema)
			if code != c.code || !strings.Contains(stderr, c.msg) || !strings.Contains(stderr, "spilled") {
				t.Fatalf("exit %d, want %d, and a spill and %q on stderr:\n%s", code, c.code, c.msg, stderr)
			}
			emptyDir(t, dir, "after the run")
			if open := spillLinks(t, self, dir); len(open) != 0 {
				t.Errorf("spill files still open after the run: %v", open)
			}
		})
	}

	t.Run("sigint while paused at fit", func(t *testing.T) {
		bin := buildAssort(t)
		dir := t.TempDir()
		p := startAssort(t, bin, []string{pauseEnv + "=" + phaseFit}, "fit", "sig", "--query", "SELECT id, f1, f2, f3, f4 FROM "+w.table("src"),
			"--key", "id", "--k", "3", "--memory", "5MiB", "--workers", "2", "--spill-dir", dir, "-d", w.url, "--schema", w.schema)
		p.waitPaused(t, time.Minute)
		pid := p.cmd.Process.Pid
		open := spillLinks(t, strconv.Itoa(pid), dir)
		if len(open) != 2 || !strings.HasSuffix(open[0], " (deleted)") || !strings.HasSuffix(open[1], " (deleted)") {
			t.Errorf("while paused: open spill files %v, want its two files, unlinked", open)
		}
		emptyDir(t, dir, "while paused")
		p.signal(t, syscall.SIGINT)
		if code := p.wait(t, 10*time.Second); code != 130 {
			t.Errorf("exit status %d, want 130; stderr:\n%s", code, p.errOutput())
		}
		emptyDir(t, dir, "after SIGINT")
		if _, err := os.Stat(filepath.Join("/proc", strconv.Itoa(pid))); err == nil {
			t.Errorf("process %d still exists after it exited", pid)
		}
	})
}

// TestScoreSameForAnyWorkers scores the same rows with a stored mixture
// with 1 worker and chunks of 7 rows, and again with 8 workers and
// the default chunks, and checks that both give the same results and
// memberships bit for bit: rows stream through the pipeline, and every
// row's outputs depend on that row alone.
func TestScoreSameForAnyWorkers(t *testing.T) {
	w := newWorkspace(t)
	w.overlapping(t, "src", 20000)
	mustAssort(t, w.args("fit", "sc", "--query", "SELECT id, f1, f2, f3, f4 FROM "+w.table("src")+" WHERE id <= 8000", "--key", "id",
		"--method", "gmm", "--k", "3", "--restarts", "1", "--scale", "standard", "--membership-floor", "0")...)
	query := "SELECT id, f1, f2, f3, f4 FROM " + w.table("src")
	mustAssort(t, w.args("score", "sc", "--query", query, "--mode", "replace", "--workers", "1", "--chunk-rows", "7", "--memory", "16MiB")...)
	w.exec(t, "CREATE TABLE "+w.table("snap")+" AS SELECT * FROM "+w.table("sc_v1"))
	w.exec(t, "CREATE TABLE "+w.table("snap_m")+" AS SELECT * FROM "+w.table("sc_v1_memberships"))
	mustAssort(t, w.args("score", "sc", "--query", query, "--mode", "replace", "--workers", "8", "--memory", "16MiB")...)
	var rows, members int
	w.scalar(t, "SELECT count(*) FROM "+w.table("sc_v1"), &rows)
	w.scalar(t, "SELECT count(*) FROM "+w.table("sc_v1_memberships"), &members)
	if rows != 20000 || members != 3*20000 {
		t.Errorf("%d results and %d memberships, want 20000 and 60000 (floor 0: every component of every row)", rows, members)
	}
	if d := sameRows(t, w, "SELECT * FROM "+w.table("snap"), "SELECT * FROM "+w.table("sc_v1")); d != 0 {
		t.Errorf("%d result rows differ between 1 and 8 workers", d)
	}
	if d := sameRows(t, w, "SELECT * FROM "+w.table("snap_m"), "SELECT * FROM "+w.table("sc_v1_memberships")); d != 0 {
		t.Errorf("%d membership rows differ between 1 and 8 workers", d)
	}
}

// TestMeter checks the progress lines: with and without a known total,
// the plain timestamped line off a terminal, none before its time, and
// none at all under --quiet. The meter's clock is set back, so that the
// rate and the time left are known: 250 rows in 10 s of 1000 is 25 rows/s
// and 30 s left.
func TestMeter(t *testing.T) {
	cases := []struct {
		name   string
		total  int64
		quiet  bool
		status string
		want   string
	}{
		{"known total", 1000, false, "", "write results: 250 of 1000 rows (25%), 25 rows/s, 30s left\n"},
		{"unknown total", 0, false, "", "write results: 250 rows, 25 rows/s\n"},
		{"with a fit's status", 0, false, "start 1 of 4, iteration 7, inertia 12.5", "write results: 250 rows, 25 rows/s; start 1 of 4, iteration 7, inertia 12.5\n"},
		{"quiet", 1000, true, "", ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var buf bytes.Buffer
			e := &env{stderr: &buf, quiet: c.quiet}
			m := e.meter("write results", c.total)
			if m != nil {
				m.start = time.Now().Add(-10 * time.Second)
				m.last = m.start
			}
			m.setStatus(c.status)
			m.add(250)
			m.add(10) // too soon for another line
			m.end()
			got := buf.String()
			if c.want == "" {
				if got != "" || m != nil {
					t.Fatalf("quiet meter wrote %q", got)
				}
				return
			}
			if !strings.HasPrefix(got, "assort: ") || !strings.HasSuffix(got, c.want) || strings.Count(got, "\n") != 1 {
				t.Fatalf("progress %q, want one line ending %q", got, c.want)
			}
			stamp := strings.TrimSuffix(strings.TrimPrefix(got, "assort: "), " "+c.want)
			if _, err := time.Parse("2006-01-02 15:04:05", stamp); err != nil {
				t.Errorf("progress line's time %q: %v", stamp, err)
			}
			if m.rows() != 260 {
				t.Errorf("meter counted %d rows, want 260", m.rows())
			}
		})
	}
	// A terminal is a character device; /dev/null is one, a buffer or a
	// regular file is not.
	dev, err := os.OpenFile(os.DevNull, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer dev.Close()
	file, err := os.Create(filepath.Join(t.TempDir(), "log"))
	if err != nil {
		t.Fatal(err)
	}
	defer file.Close()
	if !isTerminal(dev) || isTerminal(file) || isTerminal(&bytes.Buffer{}) {
		t.Errorf("isTerminal: %s %v, a file %v, a buffer %v; want true, false, false", os.DevNull, isTerminal(dev), isTerminal(file), isTerminal(&bytes.Buffer{}))
	}
}

// BenchmarkScorePass measures the pipeline of a k-means scoring pass
// alone, without the database: a memory store of 10⁶ rows of 8 features
// fed in chunks to W workers that assign them to k = 8 centres, consumed
// in order. rows/s is the figure.
func BenchmarkScorePass(b *testing.B) {
	const n, d, k = 1_000_000, 8, 8
	rng := rand.New(rand.NewPCG(1, 2))
	st := dbio.NewMemStore(d, dbio.MemStoreConfig{ChunkRows: storeChunkRows})
	c := dbio.Chunk{D: d}
	for lo := 0; lo < n; lo += 65536 {
		c.N = min(65536, n-lo)
		c.X = c.X[:0]
		c.Keys.Reset()
		for i := range c.N {
			for range d {
				c.X = append(c.X, rng.NormFloat64())
			}
			c.Keys.Append([]byte(strconv.Itoa(lo + i)))
		}
		st.Append(&c)
	}
	centers := make([]float64, k*d)
	for i := range centers {
		centers[i] = rng.NormFloat64()
	}
	model := &scoringModel{k: k, d: d, centers: centers}
	for _, workers := range []int{1, 2} {
		b.Run("workers="+strconv.Itoa(workers), func(b *testing.B) {
			for b.Loop() {
				p, err := startPipeline(context.Background(), storeFeedFunc(st, st), workers, k, model.results)
				if err != nil {
					b.Fatal(err)
				}
				for {
					bt, err := p.next()
					if err != nil {
						b.Fatal(err)
					}
					if bt == nil {
						break
					}
					p.release(bt)
				}
				p.stop()
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
		})
	}
}
