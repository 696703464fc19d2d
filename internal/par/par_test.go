package par

import (
	"sync/atomic"
	"testing"
)

func TestForVisitsEachOnce(t *testing.T) {
	for _, workers := range []int{0, 1, 2, 7} {
		for _, n := range []int{0, 1, 5, 1000} {
			seen := make([]atomic.Int32, n)
			For(n, workers, func(i int) { seen[i].Add(1) })
			for i := range seen {
				if c := seen[i].Load(); c != 1 {
					t.Fatalf("workers %d n %d: item %d ran %d times", workers, n, i, c)
				}
			}
		}
	}
}
