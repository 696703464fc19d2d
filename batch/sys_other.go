//go:build !linux

package batch

// MachineMemory returns the machine's physical memory in bytes where
// the package knows how to ask (Linux), or 0.
func MachineMemory() int64 { return 0 }

// peakRSS returns 0: the peak resident set size is read on Linux only.
func peakRSS() int64 { return 0 }
