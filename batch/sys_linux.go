package batch

import "syscall"

// MachineMemory returns the machine's physical memory in bytes (Linux:
// sysinfo(2)), or 0 when unknown.
func MachineMemory() int64 {
	var si syscall.Sysinfo_t
	if err := syscall.Sysinfo(&si); err != nil {
		return 0
	}
	return int64(si.Totalram) * int64(si.Unit)
}

// peakRSS returns the process's peak resident set size in bytes
// (getrusage(2); Linux reports ru_maxrss in KiB), or 0 when unknown.
func peakRSS() int64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return int64(ru.Maxrss) << 10
}
