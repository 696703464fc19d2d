//go:build !(linux || darwin || freebsd || netbsd || openbsd || dragonfly)

package batch

import (
	"fmt"
	"os"
)

// lockRun creates path exclusively: on systems without flock(2) a
// killed run leaves the file behind, and the error says to remove it.
func lockRun(path string) (unlock func(), err error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		if os.IsExist(err) {
			return nil, fmt.Errorf("%w: %s exists: another scanfold batch runs in this folder, or one was killed (then remove the file)", ErrBusy, path)
		}
		return nil, fmt.Errorf("batch: lock file: %w", err)
	}
	fmt.Fprintf(f, "%d\n", os.Getpid())
	return func() { f.Close(); os.Remove(path) }, nil
}
