//go:build unix && !linux

package localpg

import "syscall"

// sysProcAttr returns the attributes for the postmaster: run with cred
// (nil: as the caller). There is no parent-death signal outside Linux, so
// the server outlives a parent that dies without calling Stop.
func sysProcAttr(cred *syscall.Credential) *syscall.SysProcAttr {
	return &syscall.SysProcAttr{Credential: cred}
}
