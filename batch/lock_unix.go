//go:build linux || darwin || freebsd || netbsd || openbsd || dragonfly

package batch

import (
	"errors"
	"fmt"
	"os"
	"syscall"
)

// lockRun takes an exclusive advisory lock (flock(2)) on path, so that
// two batches never run in one run folder at once (they would onboard
// the same parts twice). The kernel releases it when the process ends,
// however it ends, so a killed run never leaves a stale lock.
func lockRun(path string) (unlock func(), err error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("batch: lock file: %w", err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, fmt.Errorf("%w: %s is locked by another scanfold batch; wait for it to end, or give another --out", ErrBusy, path)
		}
		return nil, fmt.Errorf("batch: locking %s: %w", path, err)
	}
	f.Truncate(0)
	fmt.Fprintf(f, "%d\n", os.Getpid())
	return func() {
		syscall.Flock(int(f.Fd()), syscall.LOCK_UN)
		f.Close()
	}, nil
}
