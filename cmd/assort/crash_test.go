package main

import (
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// The crash, interrupt and retry tests run assort as a real process, so
// that it can be killed or signalled at a known phase (ASSORT_PAUSE_AT, see
// phases.go) and the server has to clean up after it.

// buildAssort builds the command into the test's temporary directory and
// returns the binary's path. The Go build cache makes every build after the
// first one a link step.
func buildAssort(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "assort")
	out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// process is an assort process started by a test.
type process struct {
	cmd  *exec.Cmd
	done chan struct{} // closed once the process has exited and stderr is read

	mu     sync.Mutex
	stderr strings.Builder
	state  *os.ProcessState
}

// startAssort starts bin with args and the extra environment variables env
// ("NAME=value"). The process is killed when the test ends, should it still
// run.
func startAssort(t *testing.T, bin string, env []string, args ...string) *process {
	t.Helper()
	p := &process{cmd: exec.Command(bin, args...), done: make(chan struct{})}
	for _, kv := range os.Environ() {
		if !strings.HasPrefix(kv, "ASSORT_PAUSE_") {
			p.cmd.Env = append(p.cmd.Env, kv)
		}
	}
	p.cmd.Env = append(p.cmd.Env, env...)
	p.cmd.Stderr = p
	if err := p.cmd.Start(); err != nil {
		t.Fatalf("start %s: %v", bin, err)
	}
	go func() {
		err := p.cmd.Wait()
		var exit *exec.ExitError
		p.mu.Lock()
		if err != nil && !errors.As(err, &exit) {
			p.stderr.WriteString("test: wait: " + err.Error() + "\n")
		}
		p.state = p.cmd.ProcessState
		p.mu.Unlock()
		close(p.done)
	}()
	t.Cleanup(func() {
		select {
		case <-p.done:
		default:
			p.cmd.Process.Kill()
			<-p.done
		}
	})
	return p
}

// Write takes the process's stderr.
func (p *process) Write(b []byte) (int, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.stderr.Write(b)
}

// errOutput is what the process has written to stderr so far.
func (p *process) errOutput() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.stderr.String()
}

// waitPaused waits for the process to announce its pause, and fails the
// test if it exits first or takes longer than limit.
func (p *process) waitPaused(t *testing.T, limit time.Duration) {
	t.Helper()
	p.waitFor(t, "pausing at", limit)
}

// waitFor waits for text to appear on the process's stderr, and fails the
// test if the process exits first or text takes longer than limit.
func (p *process) waitFor(t *testing.T, text string, limit time.Duration) {
	t.Helper()
	deadline := time.After(limit)
	for !strings.Contains(p.errOutput(), text) {
		select {
		case <-p.done:
			if strings.Contains(p.errOutput(), text) {
				return
			}
			t.Fatalf("assort exited (%v) before writing %q; stderr:\n%s", p.state, text, p.errOutput())
		case <-deadline:
			t.Fatalf("assort did not write %q within %s; stderr:\n%s", text, limit, p.errOutput())
		case <-time.After(10 * time.Millisecond):
		}
	}
}

// signal sends sig to the process.
func (p *process) signal(t *testing.T, sig syscall.Signal) {
	t.Helper()
	if err := p.cmd.Process.Signal(sig); err != nil {
		t.Fatalf("send %v: %v", sig, err)
	}
}

// wait waits up to limit for the process to end and returns its exit
// status, or -1 when a signal ended it; it fails the test at the limit.
func (p *process) wait(t *testing.T, limit time.Duration) int {
	t.Helper()
	select {
	case <-p.done:
	case <-time.After(limit):
		t.Fatalf("assort still running %s after it was told to stop; stderr:\n%s", limit, p.errOutput())
	}
	return p.state.ExitCode()
}

// sessions counts the server sessions that assort runs of model open,
// writer ("assort fit NAME") and reader ("assort read NAME").
func sessions(t *testing.T, w *workspace, model string) int {
	t.Helper()
	var n int
	w.scalar(t, `SELECT count(*) FROM pg_stat_activity WHERE application_name IN ('assort fit ' || $1, 'assort read ' || $1)`, &n, model)
	return n
}

// waitSessionsGone waits until the server has ended every session of the
// runs of model: a killed client's backend ends when it next reads from
// its socket, which is soon but not at once. It fails the test after
// limit.
func waitSessionsGone(t *testing.T, w *workspace, model string, limit time.Duration) {
	t.Helper()
	deadline := time.Now().Add(limit)
	for {
		n := sessions(t, w, model)
		if n == 0 {
			return
		}
		if time.Now().After(deadline) {
			var states string
			w.scalar(t, `SELECT string_agg(application_name || ': ' || state || ', ' || coalesce(left(query, 60), ''), '; ')
				FROM pg_stat_activity WHERE application_name IN ('assort fit ' || $1, 'assort read ' || $1)`, &states, model)
			t.Fatalf("%d sessions of %s still on the server %s after the run ended: %s", n, model, limit, states)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// catalogue creates table name(id bigint PRIMARY KEY, f1..f4 float8) with
// rows rows in four groups, generated on the server from the id alone
// (group id % 4, spread by sin and cos of the id), so every run of a test
// sees the same data.
func (w *workspace) catalogue(t *testing.T, name string, rows int) {
	t.Helper()
	w.exec(t, "CREATE TABLE "+w.table(name)+" (id bigint PRIMARY KEY, f1 float8, f2 float8, f3 float8, f4 float8)")
	w.exec(t, "INSERT INTO "+w.table(name)+` SELECT g,
		(g % 4) * 10 + sin(g), (g % 4) * -6 + cos(1.3 * g), ((g % 4) / 2) * 8 + sin(0.7 * g), cos(0.3 * g)
		FROM generate_series(1, $1::int) g`, rows)
	w.exec(t, "ANALYZE "+w.table(name))
}

// registryState is the model's versions as "1:ready,2:failed,...".
func registryState(t *testing.T, w *workspace, model string) string {
	t.Helper()
	var s string
	w.scalar(t, "SELECT coalesce(string_agg(version || ':' || status, ',' ORDER BY version), '') FROM "+w.table("models")+" WHERE name = $1", &s, model)
	return s
}

// publishedState is the model's published version (0 for none) and the
// number of rows its stable view shows (-1 when there is no view).
func publishedState(t *testing.T, w *workspace, model string) (version, rows int) {
	t.Helper()
	w.scalar(t, "SELECT coalesce((SELECT version FROM "+w.table("publications")+" WHERE name = $1 ORDER BY published_at DESC LIMIT 1), 0)", &version, model)
	var view bool
	w.scalar(t, "SELECT to_regclass($1) IS NOT NULL", &view, w.table(model))
	rows = -1
	if view {
		w.scalar(t, "SELECT count(*) FROM "+w.table(model), &rows)
	}
	return version, rows
}

// versionRelations lists every relation (tables, indexes, TOAST aside) in
// the workspace whose name starts with the version table's name.
func versionRelations(t *testing.T, w *workspace, model string, version int) string {
	t.Helper()
	var s string
	w.scalar(t, `SELECT coalesce(string_agg(relname, ',' ORDER BY relname), '') FROM pg_class
		WHERE relnamespace = $1::regnamespace AND starts_with(relname, $2)`, &s, w.schema, model+"_v"+strconv.Itoa(version))
	return s
}

// TestCrashLeavesPublishedVersion kills (SIGKILL) a fit of a 200 000-row
// table at each phase of its run while version 1 of the model is
// published. The server rolls back what the dead process had begun, so
// the stable view still shows version 1 and no relation of the killed
// version exists; the next run marks the killed version's registry row
// failed (the row is reserved from the fit phase on; a kill while reading
// comes before the reservation and leaves no row) and publishes.
func TestCrashLeavesPublishedVersion(t *testing.T) {
	bin := buildAssort(t)
	// v1 is fitted on a tenth of the rows, the killed run on all of them,
	// the run after it on a quarter.
	const n, v1Rows, nextRows = 200000, 20000, 50000
	w := newWorkspace(t)
	w.catalogue(t, "src", n)
	cases := []struct {
		phase string
		// reserved: the killed run had recorded its version as 'running'.
		reserved bool
	}{
		{phaseRead, false},
		{phaseFit, true},
		{phaseWrite, true},
		{phaseCopy, true},
		{phasePublish, true},
	}
	for _, c := range cases {
		t.Run(c.phase, func(t *testing.T) {
			model := "crash_" + c.phase
			fitArgs := func(where string) []string {
				return w.args("fit", model, "--query", "SELECT id, f1, f2, f3, f4 FROM "+w.table("src")+where,
					"--key", "id", "--k", "4", "--seed", "3", "--restarts", "1", "--max-iter", "50")
			}
			mustAssort(t, fitArgs(" WHERE id % 10 = 0")...)
			before := relations(t, w)

			p := startAssort(t, bin, []string{pauseEnv + "=" + c.phase}, fitArgs("")...)
			p.waitPaused(t, time.Minute)
			p.signal(t, syscall.SIGKILL)
			if code := p.wait(t, 10*time.Second); code != -1 {
				t.Fatalf("killed run exit status %d, want none (killed by a signal)", code)
			}
			waitSessionsGone(t, w, model, 10*time.Second)

			if v, rows := publishedState(t, w, model); v != 1 || rows != v1Rows {
				t.Errorf("after the kill: published version %d showing %d rows, want 1 showing %d", v, rows, v1Rows)
			}
			if got := relations(t, w); got != before {
				t.Errorf("relations changed by the killed run:\n before %s\n after  %s", before, got)
			}
			if rel := versionRelations(t, w, model, 2); rel != "" {
				t.Errorf("after the kill: relations of the killed version exist: %s", rel)
			}
			want := "1:ready"
			if c.reserved {
				want = "1:ready,2:running" // the dead run could not finish its row
			}
			if got := registryState(t, w, model); got != want {
				t.Errorf("after the kill: registry %q, want %q", got, want)
			}

			// The next run recovers and publishes.
			code, _, stderr := assort(t, fitArgs(" WHERE id % 4 = 1")...)
			if code != exitOK {
				t.Fatalf("run after the kill: exit %d; stderr:\n%s", code, stderr)
			}
			next, want := 2, "1:ready,2:ready"
			if c.reserved {
				next, want = 3, "1:ready,2:failed,3:ready"
				if !strings.Contains(stderr, "marked unfinished earlier runs of "+model+" as failed: versions [2]") {
					t.Errorf("run after the kill does not report the recovery; stderr:\n%s", stderr)
				}
				var reason string
				w.scalar(t, "SELECT stop_reason FROM "+w.table("models")+" WHERE name = $1 AND version = 2", &reason, model)
				if reason != "run ended without finishing" {
					t.Errorf("killed version's stop_reason %q", reason)
				}
				if rel := versionRelations(t, w, model, 2); rel != "" {
					t.Errorf("relations of the killed version exist after the next run: %s", rel)
				}
			}
			if got := registryState(t, w, model); got != want {
				t.Errorf("after the next run: registry %q, want %q", got, want)
			}
			if v, rows := publishedState(t, w, model); v != next || rows != nextRows {
				t.Errorf("after the next run: published version %d showing %d rows, want %d showing %d", v, rows, next, nextRows)
			}
			if got, want := relations(t, w), withRelation(before, model+"_v"+strconv.Itoa(next)+":r"); got != want {
				t.Errorf("relations after the next run:\n got  %s\n want %s", got, want)
			}
			var running int
			w.scalar(t, "SELECT count(*) FROM "+w.table("models")+" WHERE status = 'running'", &running)
			if running != 0 {
				t.Errorf("%d registry rows still 'running'", running)
			}
		})
	}
}

// withRelation adds rel to a listing made by relations, in its order (the
// server sorts names bytewise: they are of type name, collation C).
func withRelation(listing, rel string) string {
	rels := strings.Split(listing, ",")
	if listing == "" {
		rels = nil
	}
	rels = append(rels, rel)
	slices.Sort(rels)
	return strings.Join(rels, ",")
}
