// Package cputime measures the CPU time of the calling OS thread for
// benchmarks, which is less sensitive than wall time to other processes
// competing for the cores. It is meant for test code only.
package cputime

import (
	"runtime"
	"testing"
)

// Loop runs f b.N times (through b.Loop) on a locked OS thread and reports,
// besides ns/op, the thread's CPU time per op as the metric "cpu-ns/op"
// where Thread is supported (Linux); elsewhere it reports wall time only.
// Work that f hands to other goroutines is not counted, so f should run on
// one goroutine. It calls b.ResetTimer before the loop, so setup done before
// Loop is not timed.
func Loop(b *testing.B, f func()) {
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	b.ResetTimer()
	c0, ok := Thread()
	n := 0
	for b.Loop() {
		f()
		n++
	}
	if !ok {
		return
	}
	c1, _ := Thread()
	if c := c1 - c0; c > 0 && n > 0 {
		b.ReportMetric(float64(c)/float64(n), "cpu-ns/op")
	}
}
