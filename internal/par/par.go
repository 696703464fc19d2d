// Package par runs loops over index ranges on all cores. Work is split
// into items that the caller numbers; which goroutine runs an item is
// left to timing, so callers that need deterministic results write each
// item's output to its own slot and combine the slots in order.
package par

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// For runs f(0) … f(n−1) on up to workers goroutines (0 means
// runtime.GOMAXPROCS(0)) and returns when all are done. Items are handed
// out one at a time, so uneven items balance.
func For(n, workers int, f func(i int)) {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, n)
	if workers <= 1 {
		for i := 0; i < n; i++ {
			f(i)
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				i := int(next.Add(1)) - 1
				if i >= n {
					return
				}
				f(i)
			}
		}()
	}
	wg.Wait()
}
