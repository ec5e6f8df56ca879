package promtest

import (
	"os"
	"syscall"
)

// terminate is the signal that asks a process to shut down cleanly.
var terminate os.Signal = syscall.SIGTERM

// sysProcAttr makes the kernel kill the child when the test binary dies, so
// a killed test run leaves no Prometheus behind.
func sysProcAttr() *syscall.SysProcAttr {
	return &syscall.SysProcAttr{Pdeathsig: syscall.SIGKILL}
}
