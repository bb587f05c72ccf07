//go:build !linux

package fft

import "testing"

// cpuLoop runs f b.N times (CPU time is reported on Linux only).
func cpuLoop(b *testing.B, f func()) {
	b.ResetTimer()
	for b.Loop() {
		f()
	}
}
