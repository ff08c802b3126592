package peers

import "syscall"

// sysProcAttr makes the kernel kill a peer when the process that started
// it dies, so a crashed bench leaves no database running.
func sysProcAttr() *syscall.SysProcAttr {
	return &syscall.SysProcAttr{Pdeathsig: syscall.SIGKILL}
}
