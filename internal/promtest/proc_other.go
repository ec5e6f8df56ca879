//go:build !linux

package promtest

import (
	"os"
	"syscall"
)

// terminate is the signal that asks a process to shut down cleanly.
var terminate os.Signal = os.Interrupt

func sysProcAttr() *syscall.SysProcAttr { return nil }
