//go:build !amd64 || purego

package cpufeat

func haveAVX2FMA() bool { return false }

// purego is true where no CPUID check is made (other architectures, or the
// purego build tag).
const purego = true
