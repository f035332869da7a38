package main

import (
	"context"
	"os"
)

// pauseEnv names a phase at which a run stops and waits to be killed or
// interrupted. It exists for the crash and interrupt tests, which need to
// hit a run at a known point; it is documented in DEVELOPERS.md and has no
// other use.
const pauseEnv = "ASSORT_PAUSE_AT"

// Phases a run passes through, in order.
const (
	phaseRead    = "read"    // the read transaction is open, COPY about to start
	phaseFit     = "fit"     // rows read, version reserved, fitting about to start
	phaseWrite   = "write"   // the write transaction has created the result table
	phaseCopy    = "copy"    // part of the result rows has been sent with COPY
	phasePublish = "publish" // everything written, commit about to happen
)

// checkpoint announces a phase on stderr when pausing is asked for, and
// then blocks until ctx is done.
func checkpoint(ctx context.Context, e *env, phase string) error {
	if os.Getenv(pauseEnv) != phase {
		return nil
	}
	e.warnf("pausing at %s (%s is set)", phase, pauseEnv)
	<-ctx.Done()
	return ctx.Err()
}
