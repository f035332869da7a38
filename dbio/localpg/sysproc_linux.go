//go:build linux

package localpg

import "syscall"

// sysProcAttr returns the attributes for the postmaster: run with cred
// (nil: as the caller) and receive SIGINT, PostgreSQL's fast shutdown, when
// the thread that started it exits. Start keeps that thread alive, locked to
// the goroutine that waits for the postmaster, so the signal comes when the
// whole process dies.
func sysProcAttr(cred *syscall.Credential) *syscall.SysProcAttr {
	return &syscall.SysProcAttr{Credential: cred, Pdeathsig: syscall.SIGINT}
}
