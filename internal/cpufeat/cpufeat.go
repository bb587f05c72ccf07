// Package cpufeat reports the processor features that pdwave's assembly
// kernels (model/fft, model/net) need. Builds for other architectures, or
// with the build tag purego, report no features, so the portable Go paths
// are used.
package cpufeat

// AVX2FMA reports whether the processor and the operating system support
// AVX2 and FMA3 (checked once, at start-up).
var AVX2FMA = haveAVX2FMA()
