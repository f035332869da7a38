package main

import (
	"fmt"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"
)

// result is the outcome of one in-process run.
type result struct {
	code           int
	stdout, stderr string
}

// together runs each argument list in its own goroutine, released at the
// same moment, and returns their outcomes in the same order. run() keeps
// no state between calls (flags live in a struct per call), so runs in one
// process are as independent as runs in two.
func together(t *testing.T, argLists ...[]string) []result {
	t.Helper()
	out := make([]result, len(argLists))
	start := make(chan struct{})
	var wg sync.WaitGroup
	for i, args := range argLists {
		wg.Add(1)
		go func() {
			defer wg.Done()
			<-start
			code, stdout, stderr := assort(t, args...)
			out[i] = result{code, stdout, stderr}
		}()
	}
	close(start)
	wg.Wait()
	return out
}

// TestConcurrentFitsOfOneModel starts two fits of the same model at the
// same moment, ten times. Each run pauses for 500 ms while reading
// (ASSORT_PAUSE_AT with ASSORT_PAUSE_FOR), holding the model's lock, so the
// two always overlap: exactly one succeeds and the other exits with status
// 3 (busy) having written nothing. With --wait both succeed, one after the
// other, as consecutive versions. Afterwards the registry holds versions
// 1..M, all ready, each published once in order, none 'running'.
func TestConcurrentFitsOfOneModel(t *testing.T) {
	t.Setenv(pauseEnv, phaseRead)
	t.Setenv(pauseForEnv, "500ms")
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{30, 20, 10}, 3)
	fitArgs := func(extra ...string) []string {
		return w.args(append([]string{"fit", "same", "--query", "SELECT id, x, y FROM " + w.table("pts"), "--key", "id", "--k", "3"}, extra...)...)
	}
	versions := 0
	for round := 1; round <= 10; round++ {
		rs := together(t, fitArgs(), fitArgs())
		codes := []int{rs[0].code, rs[1].code}
		slices.Sort(codes)
		if codes[0] != exitOK || codes[1] != exitBusy {
			t.Fatalf("round %d: exit statuses %v, want one %d and one %d; stderr:\n%s\n%s", round, codes, exitOK, exitBusy, rs[0].stderr, rs[1].stderr)
		}
		for _, r := range rs {
			if r.code == exitBusy && !strings.Contains(r.stderr, "model same is busy: another assort run holds its lock") {
				t.Errorf("round %d: the busy run's stderr:\n%s", round, r.stderr)
			}
		}
		versions++
		if got, want := registryState(t, w, "same"), readyVersions(versions); got != want {
			t.Fatalf("round %d: registry %q, want %q", round, got, want)
		}
	}
	for round := 1; round <= 5; round++ {
		rs := together(t, fitArgs("--wait", "30s"), fitArgs("--wait", "30s"))
		if rs[0].code != exitOK || rs[1].code != exitOK {
			t.Fatalf("with --wait, round %d: exit statuses %d and %d, want 0 and 0; stderr:\n%s\n%s", round, rs[0].code, rs[1].code, rs[0].stderr, rs[1].stderr)
		}
		versions += 2
		if got, want := registryState(t, w, "same"), readyVersions(versions); got != want {
			t.Fatalf("with --wait, round %d: registry %q, want %q", round, got, want)
		}
	}
	var pubs string
	w.scalar(t, "SELECT string_agg(version::text, ',' ORDER BY published_at) FROM "+w.table("publications")+" WHERE name = 'same'", &pubs)
	if want := versionList(versions); pubs != want {
		t.Errorf("publications in order %s, want %s", pubs, want)
	}
	if v, rows := publishedState(t, w, "same"); v != versions || rows != 60 {
		t.Errorf("published version %d showing %d rows, want %d showing 60", v, rows, versions)
	}
	var comps int
	w.scalar(t, "SELECT count(*) FROM "+w.table("components")+" WHERE name = 'same'", &comps)
	if comps != 3*versions {
		t.Errorf("%d component rows, want 3 for each of %d versions", comps, versions)
	}
	var tables int
	w.scalar(t, `SELECT count(*) FROM pg_class WHERE relnamespace = $1::regnamespace AND relkind = 'r' AND relname ~ '^same_v[0-9]+$'`, &tables, w.schema)
	if tables != versions {
		t.Errorf("%d result tables, want %d", tables, versions)
	}
}

// TestConcurrentFitsOfTwoModels runs fits of two different models at the
// same moment: their locks are different, so both go ahead at once (the
// test sees both readers on the server together) and both succeed.
func TestConcurrentFitsOfTwoModels(t *testing.T) {
	t.Setenv(pauseEnv, phaseRead)
	t.Setenv(pauseForEnv, "1s")
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{30, 20, 10}, 3)
	fitArgs := func(name string) []string {
		return w.args("fit", name, "--query", "SELECT id, x, y FROM "+w.table("pts"), "--key", "id", "--k", "3")
	}
	var rs []result
	done := make(chan struct{})
	go func() {
		defer close(done)
		rs = together(t, fitArgs("left"), fitArgs("right"))
	}()
	both := false
	for !both {
		var n int
		w.scalar(t, "SELECT count(DISTINCT application_name) FROM pg_stat_activity WHERE application_name IN ('assort read left', 'assort read right')", &n)
		both = n == 2
		select {
		case <-done:
			if !both {
				t.Fatal("the two runs never read at the same time")
			}
		case <-time.After(20 * time.Millisecond):
		}
	}
	<-done
	for i, r := range rs {
		if r.code != exitOK {
			t.Errorf("run %d: exit %d; stderr:\n%s", i, r.code, r.stderr)
		}
	}
	for _, name := range []string{"left", "right"} {
		if got := registryState(t, w, name); got != "1:ready" {
			t.Errorf("registry of %s: %q, want 1:ready", name, got)
		}
	}
}

// readyVersions is "1:ready,2:ready,...,n:ready".
func readyVersions(n int) string {
	s := make([]string, n)
	for i := range s {
		s[i] = fmt.Sprintf("%d:ready", i+1)
	}
	return strings.Join(s, ",")
}

// versionList is "1,2,...,n".
func versionList(n int) string {
	s := make([]string, n)
	for i := range s {
		s[i] = fmt.Sprint(i + 1)
	}
	return strings.Join(s, ",")
}
