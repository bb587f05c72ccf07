//go:build amd64 && !purego

package net

import "pdwave/internal/cpufeat"

// useVec reports whether the AVX2+FMA kernel in kernels_amd64.s is used.
// It is a variable so that tests can exercise the portable path too.
var useVec = cpufeat.AVX2FMA

// convTileVec is convTile (see forward.go) in AVX2+FMA: c, p and w point at
// the first elements, off holds k byte offsets, cs is the row stride of c in
// elements.
//
//go:noescape
func convTileVec(c *float64, cs int, p *float64, off *int, w *float64, k int, bias *[4]float64, relu bool)

// convTiles32Vec is convTile at width tile32 (see forward.go) in AVX2+FMA for nt ≥ 1
// tiles side by side and np ≥ 1 panels of 4 output channels: tile t of
// panel b reads p + 16t, the weights w + 4kb and the bias + 4b, and writes
// c + 16t + 4b·cs. c, p, w and bias point at the first elements, off holds
// k ≥ 1 byte offsets, cs is the row stride of c in elements. The bias
// starts the sums, so the rounding differs from convTile (which adds it
// last).
//
//go:noescape
func convTiles32Vec(c *float32, cs int, p *float32, off *int, w *float32, k int, bias *float32, relu bool, nt, np int)

// split64to32Vec sets ev[i] = float32(src[2i]), od[i] = float32(src[2i+1])
// for i < 4n, n ≥ 1 (AVX).
//
//go:noescape
func split64to32Vec(ev, od *float32, src *float64, n int)

// split32Vec sets ev[i] = src[2i], od[i] = src[2i+1] for i < 4n, n ≥ 1
// (SSE).
//
//go:noescape
func split32Vec(ev, od *float32, src *float32, n int)

// splitImage64Vec puts an image of 2·rows rows of 8q float64 into its four
// phase planes (see kernels_amd64.s); rows, q ≥ 1, rs and plane in bytes.
//
//go:noescape
func splitImage64Vec(dst *float32, src *float64, rows, q, rs, plane int)

// splitStrip32Vec splits frames segments of 8q values (strides so and do
// in elements) into even and odd values (see kernels_amd64.s); frames,
// q ≥ 1.
//
//go:noescape
func splitStrip32Vec(ev, od *float32, src *float32, frames, q, so, do int)

// spectralVec writes the five ratio channels of the blocks of nseg ≥ 1
// segments of consecutive blocks of 2×2 frequencies (see
// Featurizer.spectralPairs and kernels_amd64.s); plane is the channel
// stride of out and stride that of tmp (6 rows of the longest segment
// rounded up to 4), both in bytes; k holds reg, 0.5, 0.25, 1, −0.
//
//go:noescape
func spectralVec(out *float64, plane int, z, mean *complex128, pm, tmp *float64, stride int, k *[5][4]float64, segs *[6]int, nseg int)

// packBin2Vec fills z with the windowed complex pair of two images and
// writes their 2×2 block sums (see kernels_amd64.s); n a multiple of 8,
// rows2 ≥ 1.
//
//go:noescape
func packBin2Vec(z *complex128, d1, d2, w *float64, n, rows2 int, k *[5][4]float64, b1, b2 *float64)

// sums2Vec adds d1 to acc and sets out to the sums of d1 and d2 (n values
// each, n a positive multiple of 8).
//
//go:noescape
func sums2Vec(acc, d1, d2 *float64, n int, out *[2]float64)

// sumSqVec returns Σ (x[i] − m)², i < n, n a positive multiple of 8.
//
//go:noescape
func sumSqVec(x *float64, m float64, n int) float64
