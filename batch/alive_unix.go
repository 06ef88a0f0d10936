//go:build unix

package batch

import (
	"errors"
	"syscall"
)

// alive reports whether a process with this id exists on this host.
func alive(pid int) bool {
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}
