//go:build amd64 && !purego

package cpufeat

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

// purego is false: the CPUID check is in use.
const purego = false
