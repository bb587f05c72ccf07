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

// blockSums2Vec computes the lane-wise spectral sums of nb consecutive 2×2
// blocks (see Featurizer.spectralPairs); nb ≥ 1.
//
//go:noescape
func blockSums2Vec(out *float64, u0, u1, v0, v1, m0, m1 *complex128, nb int)
