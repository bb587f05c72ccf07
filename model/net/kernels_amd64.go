//go:build amd64 && !purego

package net

// useVec reports whether the AVX2+FMA kernel in kernels_amd64.s is used.
// It is a variable so that tests can exercise the portable path too.
var useVec = haveAVX2FMA()

func cpuid(eaxArg, ecxArg uint32) (eax, ebx, ecx, edx uint32)
func xgetbv() (eax, edx uint32)

// haveAVX2FMA reports CPU and OS support for AVX2 and FMA3 (CPUID leaf 1
// ECX bits 12 FMA, 27 OSXSAVE, 28 AVX; XCR0 bits 1–2 XMM/YMM state; leaf 7
// EBX bit 5 AVX2).
func haveAVX2FMA() bool {
	maxID, _, _, _ := cpuid(0, 0)
	if maxID < 7 {
		return false
	}
	_, _, ecx1, _ := cpuid(1, 0)
	const fma, osxsave, avx = 1 << 12, 1 << 27, 1 << 28
	if ecx1&(fma|osxsave|avx) != fma|osxsave|avx {
		return false
	}
	if xcr0, _ := xgetbv(); xcr0&6 != 6 {
		return false
	}
	_, ebx7, _, _ := cpuid(7, 0)
	return ebx7&(1<<5) != 0
}

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
