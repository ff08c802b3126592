//go:build !linux

package peers

import "syscall"

// sysProcAttr has no parent-death signal outside Linux; the stop stack
// and the context still end every peer.
func sysProcAttr() *syscall.SysProcAttr { return nil }
