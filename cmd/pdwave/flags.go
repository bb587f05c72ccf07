package main

import (
	"fmt"
	"runtime"
)

// maxWorkers is the most worker goroutines a command accepts: four per
// core, at least 16. Every worker holds its own plans and buffers, so an
// unbounded count is an unbounded allocation.
func maxWorkers() int { return max(16, 4*runtime.NumCPU()) }

// checkWorkers refuses a negative --workers or one beyond maxWorkers for
// the command cmd.
func checkWorkers(cmd string, n int) error {
	if n < 0 || n > maxWorkers() {
		return fmt.Errorf("%s: --workers %d outside 0..%d (0 = all cores; at most 4 per core, or 16)", cmd, n, maxWorkers())
	}
	return nil
}

// exclusive refuses two flags that contradict each other when both are
// set.
func exclusive(cmd string, a string, aSet bool, b string, bSet bool) error {
	if aSet && bSet {
		return fmt.Errorf("%s: %s and %s contradict each other; give one of them", cmd, a, b)
	}
	return nil
}
