//go:build !amd64 || purego

package fft

// useVec is false where no vector kernels exist; the declarations below
// only satisfy the compiler and are never called.
var useVec = false

var (
	maskNegOdd  [4]uint64
	maskNegEven [4]uint64
)

func panicNoVec() { panic("fft: internal error: vector kernel called without vector support") }

func r4vec(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int, w *[3]complex128) { panicNoVec() }
func r4vecNoTw(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int)               { panicNoVec() }
func r2vec(y0, y1, x0, x1 *complex128, n int, w *complex128)                    { panicNoVec() }
func r2vecNoTw(y0, y1, x0, x1 *complex128, n int)                               { panicNoVec() }
func r4s1vec(y, x *complex128, m int, tv *float64, mask *[4]uint64)             { panicNoVec() }
func r3vec(y0, y1, y2, x0, x1, x2 *complex128, n int, wt *[4][4]float64)        { panicNoVec() }
func r5vec(y0, y1, y2, y3, y4, x0, x1, x2, x3, x4 *complex128, n int, wt *[8][4]float64) {
	panicNoVec()
}

func r4stage(dst, src *complex128, m, s int, tw *complex128, mask *[4]uint64) { panicNoVec() }

func scalevec(x *complex128, n int, s float64) { panicNoVec() }

func interleave(z *complex128, a, b *float64, quads int)              { panicNoVec() }
func deinterleave(a, b *float64, z *complex128, quads int, s float64) { panicNoVec() }
func unpackRows(c0, c1, zl, zm *complex128, pairs int)                { panicNoVec() }
func hermHalf(c, s0, sm *complex128, pairs int)                       { panicNoVec() }
func packInv(zf, zr, g0, g1 *complex128, pairs int)                   { panicNoVec() }
func conjRev(d, c *complex128, pairs int)                             { panicNoVec() }

func r8last(dst, src *complex128, s int, mask *[4]uint64) { panicNoVec() }
