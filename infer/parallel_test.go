package infer

import (
	"sync/atomic"
	"testing"
)

// TestForEach: every index is done exactly once, by at most workers
// goroutines each set up once, for counts below, at and above the worker
// count (and zero).
func TestForEach(t *testing.T) {
	for _, c := range []struct{ count, workers int }{{0, 3}, {1, 3}, {3, 3}, {100, 3}, {7, 0}} {
		hits := make([]int32, c.count)
		var setups int32
		ForEach(c.count, c.workers, func() *int32 { atomic.AddInt32(&setups, 1); return new(int32) }, func(w *int32, i int) {
			atomic.AddInt32(&hits[i], 1)
			*w++
		})
		for i, h := range hits {
			if h != 1 {
				t.Errorf("count %d, workers %d: index %d done %d times", c.count, c.workers, i, h)
			}
		}
		if lim := max(c.workers, 1); c.workers > 0 && int(setups) > min(lim, c.count) {
			t.Errorf("count %d, workers %d: %d workers set up", c.count, c.workers, setups)
		}
	}
}
