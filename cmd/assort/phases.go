package main

import (
	"context"
	"os"
	"time"
)

// pauseEnv names a phase at which a run stops and waits to be killed or
// interrupted. It exists for the crash and interrupt tests, which need to
// hit a run at a known point; it is documented in DEVELOPERS.md and has no
// other use.
const pauseEnv = "ASSORT_PAUSE_AT"

// pauseForEnv, set together with pauseEnv to a duration ("2s"), makes the
// pause end after that long, and the run go on. The retry and concurrency
// tests use it to act on a run's connections at a known point, or to hold
// a model's lock for a known time, and then let the run continue.
const pauseForEnv = "ASSORT_PAUSE_FOR"

// Phases a run passes through, in order.
const (
	phaseRead    = "read"    // the read transaction is open, COPY about to start
	phaseFit     = "fit"     // rows read, version reserved, fitting about to start
	phaseWrite   = "write"   // the write transaction has created the result table
	phaseCopy    = "copy"    // part of the result rows has been sent with COPY
	phasePublish = "publish" // everything written, commit about to happen
)

// checkpoint announces a phase on stderr when pausing is asked for, and
// then blocks until ctx is done, or for the duration in pauseForEnv when
// that is set.
func checkpoint(ctx context.Context, e *env, phase string) error {
	if os.Getenv(pauseEnv) != phase {
		return nil
	}
	var limit <-chan time.Time
	if s := os.Getenv(pauseForEnv); s != "" {
		d, err := time.ParseDuration(s)
		if err != nil || d < 0 {
			// Only tests set it; a typo there is a programmer's mistake.
			panic("assort: " + pauseForEnv + " must be a duration such as 2s, got " + s)
		}
		e.warnf("pausing at %s for %s (%s and %s are set)", phase, d, pauseEnv, pauseForEnv)
		t := time.NewTimer(d)
		defer t.Stop()
		limit = t.C
	} else {
		e.warnf("pausing at %s (%s is set)", phase, pauseEnv)
	}
	select {
	case <-ctx.Done():
		return ctx.Err()
	case <-limit:
		return nil
	}
}
