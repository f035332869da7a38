package main

import (
	"errors"
	"fmt"
)

// Exit statuses, documented in the README for schedulers.
const (
	exitOK      = 0 // success
	exitFailure = 1 // the run failed; nothing was published
	exitUsage   = 2 // bad flags or arguments; nothing was done
	exitBusy    = 3 // another run holds the model's lock
)

// usageError is a mistake in the command line.
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

func usagef(format string, args ...any) error {
	return &usageError{msg: fmt.Sprintf(format, args...)}
}

// busyError says another run of the same model is in progress.
type busyError struct{ model string }

func (e *busyError) Error() string {
	return fmt.Sprintf("model %s is busy: another assort run holds its lock; try again later", e.model)
}

func exitStatus(err error) int {
	var u *usageError
	var b *busyError
	switch {
	case err == nil:
		return exitOK
	case errors.As(err, &u):
		return exitUsage
	case errors.As(err, &b):
		return exitBusy
	}
	return exitFailure
}
