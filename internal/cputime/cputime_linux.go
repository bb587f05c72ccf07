//go:build linux

package cputime

import "syscall"

// Thread returns the user plus system CPU time used so far by the calling
// OS thread (getrusage RUSAGE_THREAD), in nanoseconds, and whether it could
// be read. Lock the goroutine to its thread (runtime.LockOSThread) between
// two readings, or the difference means nothing.
func Thread() (ns int64, ok bool) {
	const rusageThread = 1 // RUSAGE_THREAD, Linux ≥ 2.6.26
	var ru syscall.Rusage
	if err := syscall.Getrusage(rusageThread, &ru); err != nil {
		return 0, false
	}
	return ru.Utime.Nano() + ru.Stime.Nano(), true
}
