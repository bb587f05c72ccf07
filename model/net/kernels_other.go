//go:build !amd64 || purego

package net

// useVec is false where no vector kernel exists; the kernels below only
// satisfy the compiler and are never called.
var useVec = false

func convTileVec(c *float64, cs int, p *float64, off *int, w *float64, k int, bias *[4]float64, relu bool) {
	panic("net: internal error: vector kernel called without vector support")
}

func convTiles32Vec(c *float32, cs int, p *float32, off *int, w *float32, k int, bias *float32, relu bool, nt, np int) {
	panic("net: internal error: vector kernel called without vector support")
}

func split64to32Vec(ev, od *float32, src *float64, n int) {
	panic("net: internal error: vector kernel called without vector support")
}

func split32Vec(ev, od *float32, src *float32, n int) {
	panic("net: internal error: vector kernel called without vector support")
}

func splitImage64Vec(dst *float32, src *float64, rows, q, rs, plane int) {
	panic("net: internal error: vector kernel called without vector support")
}

func splitStrip32Vec(ev, od *float32, src *float32, frames, q, so, do int) {
	panic("net: internal error: vector kernel called without vector support")
}

func spectralVec(out *float64, plane int, z, mean *complex128, pm, tmp *float64, stride int, k *[5][4]float64, segs *[6]int, nseg int) {
	panic("net: internal error: vector kernel called without vector support")
}

func packBin2Vec(z *complex128, d1, d2, w *float64, n, rows2 int, k *[5][4]float64, b1, b2 *float64) {
	panic("net: internal error: vector kernel called without vector support")
}

func sums2Vec(acc, d1, d2 *float64, n int, out *[2]float64) {
	panic("net: internal error: vector kernel called without vector support")
}

func sumSqVec(x *float64, m float64, n int) float64 {
	panic("net: internal error: vector kernel called without vector support")
}
