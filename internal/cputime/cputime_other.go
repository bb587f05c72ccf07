//go:build !linux

package cputime

// Thread reports that the thread's CPU time is not available on this
// operating system: it returns 0, false.
func Thread() (ns int64, ok bool) { return 0, false }
