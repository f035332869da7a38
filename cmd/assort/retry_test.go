package main

import (
	"strings"
	"testing"
	"time"
)

// TestRetryAfterTerminatedSession ends one of a fit's server sessions with
// pg_terminate_backend, as a DBA or a failover would: the reader's ("assort
// read NAME") while it is about to COPY the rows out, or the writer's
// ("assort fit NAME") inside the write transaction. The run pauses at that
// phase for a moment (ASSORT_PAUSE_AT with ASSORT_PAUSE_FOR), the test ends
// the session, and the run goes on into the dead connection. Without
// --retries the run fails with status 1 naming the cause and publishes
// nothing; with --retries 1 it starts again from the beginning and
// publishes exactly one new version. Either way the failed attempt leaves
// no registry row behind: a live run removes its 'running' row when it
// fails, whichever of its connections died, so the versions stay 1, 2, 3...
func TestRetryAfterTerminatedSession(t *testing.T) {
	bin := buildAssort(t)
	w := newWorkspace(t)
	w.catalogue(t, "src", 20000)
	query := "SELECT id, f1, f2, f3, f4 FROM " + w.table("src")

	cases := []struct {
		name    string
		phase   string // where the run pauses
		session string // whose session is ended: "read" or "fit"
		retries string
		code    int
		want    string // registry afterwards
		pub     int    // published version afterwards
	}{
		{"reader ended, no retries", phaseRead, "read", "0", exitFailure, "1:ready", 1},
		{"reader ended, one retry", phaseRead, "read", "1", exitOK, "1:ready,2:ready", 2},
		{"writer ended, no retries", phaseWrite, "fit", "0", exitFailure, "1:ready", 1},
		{"writer ended, one retry", phaseWrite, "fit", "1", exitOK, "1:ready,2:ready", 2},
	}
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			model := "retry_" + string(rune('a'+i))
			args := func(where string) []string {
				return []string{"fit", model, "--query", query + where, "--key", "id", "--k", "4", "--seed", "3",
					"--restarts", "1", "--max-iter", "50", "-d", w.url, "--schema", w.schema}
			}
			mustAssort(t, append(args(" WHERE id % 10 = 0"), "-q")...) // v1: 2000 rows

			p := startAssort(t, bin, []string{pauseEnv + "=" + c.phase, pauseForEnv + "=2s"},
				append(args(""), "--retries", c.retries)...)
			p.waitPaused(t, time.Minute)
			var ended int
			// pg_terminate_backend with a timeout waits for the session to be
			// gone (PostgreSQL 14 and later).
			w.scalar(t, `SELECT count(*) FILTER (WHERE pg_terminate_backend(pid, 5000)) FROM pg_stat_activity WHERE application_name = $1`,
				&ended, "assort "+c.session+" "+model)
			if ended != 1 {
				t.Fatalf("ended %d sessions named %q, want 1", ended, "assort "+c.session+" "+model)
			}
			code := p.wait(t, time.Minute)
			stderr := p.errOutput()
			if code != c.code {
				t.Fatalf("exit status %d, want %d; stderr:\n%s", code, c.code, stderr)
			}
			// The cause is named: the server's message when the client read
			// it, or the lost connection when it wrote first.
			if cause := failureLine(stderr, "assort fit: ", "failed: "); !strings.Contains(cause, "terminating connection due to administrator command") &&
				!strings.Contains(cause, "unexpected EOF") && !strings.Contains(cause, "use of closed network connection") {
				t.Errorf("the failure does not name the ended session: %q; stderr:\n%s", cause, stderr)
			}
			if c.code == exitOK && !strings.Contains(stderr, "attempt 1 of 2 failed") {
				t.Errorf("stderr does not report the retry:\n%s", stderr)
			}
			if strings.Contains(stderr, "could not remove the registry row") {
				t.Errorf("the failed attempt could not remove its registry row:\n%s", stderr)
			}
			waitSessionsGone(t, w, model, 5*time.Second)
			if got := registryState(t, w, model); got != c.want {
				t.Errorf("registry %q, want %q; stderr:\n%s", got, c.want, stderr)
			}
			wantRows := 2000
			if c.pub == 2 {
				wantRows = 20000
			}
			if v, rows := publishedState(t, w, model); v != c.pub || rows != wantRows {
				t.Errorf("published version %d showing %d rows, want %d showing %d", v, rows, c.pub, wantRows)
			}
			var pubs int
			w.scalar(t, "SELECT count(*) FROM "+w.table("publications")+" WHERE name = $1", &pubs, model)
			if pubs != c.pub {
				t.Errorf("%d publications, want %d", pubs, c.pub)
			}
			if rel := versionRelations(t, w, model, 3); rel != "" {
				t.Errorf("relations of a third version exist: %s", rel)
			}
		})
	}
}

// failureLine returns the first line of stderr holding prefix (the final
// error of a run) or, failing that, marker (a retried attempt's warning).
func failureLine(stderr, prefix, marker string) string {
	lines := strings.Split(stderr, "\n")
	for _, l := range lines {
		if strings.HasPrefix(l, prefix) {
			return l
		}
	}
	for _, l := range lines {
		if strings.Contains(l, marker) {
			return l
		}
	}
	return ""
}
