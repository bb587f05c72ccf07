package net

import (
	"testing"

	"pdwave/internal/cputime"
)

// cpuLoop runs f b.N times and reports the thread's CPU time per op besides
// ns/op (see cputime.Loop).
func cpuLoop(b *testing.B, f func()) { cputime.Loop(b, f) }
