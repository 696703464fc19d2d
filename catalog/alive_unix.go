//go:build unix

package catalog

import (
	"errors"
	"syscall"
)

// processAlive reports whether a process with this id exists, by
// sending it signal 0 (POSIX kill(2): existence and permission check
// only). EPERM means it exists but belongs to someone else.
func processAlive(pid int) bool {
	if pid <= 0 {
		return false
	}
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}
