package cputime

import (
	"runtime"
	"testing"
)

// The thread's CPU time grows while the thread computes (a loop that never
// ends fails the test by timeout, one that reads a constant fails below).
func TestThreadAdvances(t *testing.T) {
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	c0, ok := Thread()
	if !ok {
		if runtime.GOOS == "linux" {
			t.Fatal("thread CPU time not available on linux")
		}
		return
	}
	x := 1.0
	for c1, _ := Thread(); c1-c0 < 20e6; c1, _ = Thread() {
		for i := 0; i < 100000; i++ {
			x = x*1.0000001 + 1e-9
		}
	}
	if x == 0 {
		t.Fatal("unreachable")
	}
	c1, _ := Thread()
	if d := c1 - c0; d < 20e6 {
		t.Fatalf("CPU time advanced by %d ns, want ≥ 20 ms", d)
	}
}

func BenchmarkLoop(b *testing.B) {
	x := 1.0
	Loop(b, func() {
		for i := 0; i < 1000; i++ {
			x = x*1.0000001 + 1e-9
		}
	})
	if x == 0 {
		b.Fatal("unreachable")
	}
}
