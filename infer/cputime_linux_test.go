//go:build linux

package infer

import (
	"syscall"
	"testing"
)

// processCPU returns the CPU time used so far by the whole process
// (getrusage RUSAGE_SELF), in nanoseconds. The fit runs on more than one
// goroutine (gonum's optimiser drives the method from its own goroutine),
// so the thread's time would miss part of it; benchmarks run one fit at a
// time, so the process time is the fit's CPU time (plus GC).
func processCPU() int64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return ru.Utime.Nano() + ru.Stime.Nano()
}

// cpuLoop runs f b.N times and reports, besides ns/op, the process CPU
// time per op ("cpu-ns/op"), which is less sensitive to other processes
// competing for the two cores than wall time.
func cpuLoop(b *testing.B, f func()) {
	b.ResetTimer()
	c0 := processCPU()
	n := 0
	for b.Loop() {
		f()
		n++
	}
	if c := processCPU() - c0; c > 0 && n > 0 {
		b.ReportMetric(float64(c)/float64(n), "cpu-ns/op")
	}
}
