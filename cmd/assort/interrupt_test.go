package main

import (
	"strings"
	"syscall"
	"testing"
	"time"
)

// TestInterruptEndsRunCleanly sends SIGINT or SIGTERM to a fit at several
// points: paused at a phase, and in the middle of a long mixture fit that
// is really iterating. The run must end within 5 s of the signal with the
// conventional status (128 + the signal number: 130, 143; common
// practice), publish nothing, remove its version's 'running' registry row,
// and leave no session on the server.
func TestInterruptEndsRunCleanly(t *testing.T) {
	bin := buildAssort(t)
	const n, v1Rows = 200000, 20000
	w := newWorkspace(t)
	w.catalogue(t, "src", n)
	query := "SELECT id, f1, f2, f3, f4 FROM " + w.table("src")
	kmeans := []string{"--k", "4", "--seed", "3", "--restarts", "1", "--max-iter", "50"}
	// A mixture fit that would iterate for many minutes: no tolerance to
	// stop it and a high iteration limit.
	long := []string{"--method", "gmm", "--k", "4", "--seed", "3", "--restarts", "50", "--tol", "0", "--max-iter", "100000"}

	cases := []struct {
		name  string
		pause string   // ASSORT_PAUSE_AT, or "" to signal once "wait" shows
		wait  string   // text on stderr after which the signal is sent
		args  []string // method flags
		sig   syscall.Signal
		code  int
		msg   string // on stderr
	}{
		{"sigint paused at read", phaseRead, "pausing at", kmeans, syscall.SIGINT, 130, "assort: interrupted by SIGINT"},
		{"sigint paused at fit", phaseFit, "pausing at", kmeans, syscall.SIGINT, 130, "assort: interrupted by SIGINT"},
		{"sigint paused at copy", phaseCopy, "pausing at", kmeans, syscall.SIGINT, 130, "assort: interrupted by SIGINT"},
		{"sigterm paused at write", phaseWrite, "pausing at", kmeans, syscall.SIGTERM, 143, "assort: interrupted by SIGTERM"},
		{"sigterm paused at publish", phasePublish, "pausing at", kmeans, syscall.SIGTERM, 143, "assort: interrupted by SIGTERM"},
		{"sigint while iterating", "", "fitting ", long, syscall.SIGINT, 130, "assort: interrupted by SIGINT"},
		{"sigterm while iterating", "", "fitting ", long, syscall.SIGTERM, 143, "assort: interrupted by SIGTERM"},
	}
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			model := "stop_" + string(rune('a'+i))
			args := func(where string, quiet bool) []string {
				a := append([]string{"fit", model, "--query", query + where, "--key", "id"}, c.args...)
				a = append(a, "-d", w.url, "--schema", w.schema)
				if quiet {
					a = append(a, "-q")
				}
				return a
			}
			mustAssort(t, append(args(" WHERE id % 10 = 0", true), "--max-iter", "20", "--restarts", "1", "--tol", "1e-3")...)
			before := relations(t, w)

			var env []string
			if c.pause != "" {
				env = append(env, pauseEnv+"="+c.pause)
			}
			p := startAssort(t, bin, env, args("", false)...)
			p.waitFor(t, c.wait, time.Minute)
			if c.pause == "" {
				time.Sleep(300 * time.Millisecond) // well into the iterations
			}
			p.signal(t, c.sig)
			// A bound on how long an interrupted run may take to end, not a
			// measure of speed: a scheduler that sends SIGTERM waits a few
			// seconds before SIGKILL.
			code := p.wait(t, 5*time.Second)
			stderr := p.errOutput()
			if code != c.code {
				t.Errorf("exit status %d, want %d; stderr:\n%s", code, c.code, stderr)
			}
			if !strings.Contains(stderr, c.msg) {
				t.Errorf("stderr lacks %q:\n%s", c.msg, stderr)
			}
			waitSessionsGone(t, w, model, 5*time.Second)

			if v, rows := publishedState(t, w, model); v != 1 || rows != v1Rows {
				t.Errorf("published version %d showing %d rows, want 1 showing %d", v, rows, v1Rows)
			}
			if got := registryState(t, w, model); got != "1:ready" {
				t.Errorf("registry %q, want %q (the interrupted run removes its row); stderr:\n%s", got, "1:ready", stderr)
			}
			if got := relations(t, w); got != before {
				t.Errorf("relations changed by the interrupted run:\n before %s\n after  %s", before, got)
			}
			if rel := versionRelations(t, w, model, 2); rel != "" {
				t.Errorf("relations of the interrupted version exist: %s", rel)
			}
		})
	}
}
