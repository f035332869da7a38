// Command assort clusters rows held in PostgreSQL and writes the results
// back as versioned tables. See usage.go for the commands and README.md for
// the table layout.
package main

import (
	"context"
	"fmt"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	sig := make(chan os.Signal, 1)
	signal.Notify(sig, os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	if code != exitOK && ctx.Err() != nil {
		select {
		case s := <-sig:
			code = signalStatus(s)
			// The error above reads "context canceled"; say why.
			fmt.Fprintf(os.Stderr, "assort: interrupted by %s; nothing was published\n", signalName(s))
		default:
		}
	}
	os.Exit(code)
}

// signalStatus is the conventional exit status of a run ended by s:
// 128 + the signal number (130 for SIGINT, 143 for SIGTERM).
func signalStatus(s os.Signal) int {
	if n, ok := s.(syscall.Signal); ok {
		return 128 + int(n)
	}
	return exitFailure
}

// signalName is the conventional name of s, as in kill -l.
func signalName(s os.Signal) string {
	switch s {
	case syscall.SIGINT:
		return "SIGINT"
	case syscall.SIGTERM:
		return "SIGTERM"
	}
	return s.String()
}
