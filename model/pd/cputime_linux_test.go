//go:build linux

package pd

import (
	"runtime"
	"syscall"
	"testing"
)

// threadCPU returns the CPU time used so far by the calling OS thread
// (getrusage RUSAGE_THREAD), in nanoseconds.
func threadCPU() int64 {
	const rusageThread = 1
	var ru syscall.Rusage
	if err := syscall.Getrusage(rusageThread, &ru); err != nil {
		return 0
	}
	return ru.Utime.Nano() + ru.Stime.Nano()
}

// cpuLoop runs f b.N times on a locked thread and reports, besides ns/op,
// the thread's CPU time per op ("cpu-ns/op"), which is less sensitive to
// other processes competing for the two cores than wall time.
func cpuLoop(b *testing.B, f func()) {
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	b.ResetTimer()
	c0 := threadCPU()
	n := 0
	for b.Loop() {
		f()
		n++
	}
	if c := threadCPU() - c0; c > 0 && n > 0 {
		b.ReportMetric(float64(c)/float64(n), "cpu-ns/op")
	}
}
