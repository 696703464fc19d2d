//go:build !unix

package catalog

// processAlive cannot ask the system on this platform and assumes the
// process lives; files and records of dead filings then become stale
// only after Options.StaleAfter.
func processAlive(pid int) bool { return pid > 0 }
