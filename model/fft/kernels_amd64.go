//go:build amd64 && !purego

package fft

import "pdwave/internal/cpufeat"

// useVec reports whether the AVX2+FMA kernels in kernels_amd64.s are used.
// It is a variable so that tests can exercise the portable path too.
var useVec = cpufeat.AVX2FMA

// The vector kernels process n complex values of each slice, n even and
// n >= 2, reading x0.. and writing y0.. (which must not overlap them).
// They compute the forward butterflies of radix2/radix4 with the twiddles
// in w (w[k-1] multiplies output k); the NoTw versions use unit twiddles.

//go:noescape
func r4vec(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int, w *[3]complex128)

//go:noescape
func r4vecNoTw(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int)

//go:noescape
func r2vec(y0, y1, x0, x1 *complex128, n int, w *complex128)

//go:noescape
func r2vecNoTw(y0, y1, x0, x1 *complex128, n int)

//go:noescape
func r4s1vec(y, x *complex128, m int, tv *float64, mask *[4]uint64)

// Sign masks for r4s1vec: negate the imaginary (forward) or real
// (inverse) lanes.
var (
	maskNegOdd  = [4]uint64{0, 1 << 63, 0, 1 << 63}
	maskNegEven = [4]uint64{1 << 63, 0, 1 << 63, 0}
)

//go:noescape
func r3vec(y0, y1, y2, x0, x1, x2 *complex128, n int, wt *[4][4]float64)

//go:noescape
func r5vec(y0, y1, y2, y3, y4, x0, x1, x2, x3, x4 *complex128, n int, wt *[8][4]float64)

//go:noescape
func r4stage(dst, src *complex128, m, s int, tw *complex128, mask *[4]uint64)

//go:noescape
func scalevec(x *complex128, n int, s float64)

// Helpers for the real transforms (see kernels_amd64.s); counts are of
// groups of 4 (quads) or 2 (pairs) values and must be >= 1.

//go:noescape
func interleave(z *complex128, a, b *float64, quads int)

//go:noescape
func deinterleave(a, b *float64, z *complex128, quads int, s float64)

//go:noescape
func unpackRows(c0, c1, zl, zm *complex128, pairs int)

//go:noescape
func hermHalf(c, s0, sm *complex128, pairs int)

//go:noescape
func packInv(zf, zr, g0, g1 *complex128, pairs int)

//go:noescape
func conjRev(d, c *complex128, pairs int)

//go:noescape
func r8last(dst, src *complex128, s int, mask *[4]uint64)
