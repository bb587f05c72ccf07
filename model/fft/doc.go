// Package fft computes 2-D discrete Fourier transforms of complex and real
// images for pdwave.
//
// # Conventions
//
//   - Images are row-major slices of length ny*nx with x fastest: element
//     (y, x) is at index y*nx+x. Spectra use the same layout, frequency
//     index (k, l) at k*nx+l, zero frequency at index 0 (use Shift or
//     ShiftComplex to centre it).
//   - Forward is unnormalised with a negative exponent and Inverse carries
//     the factor 1/(ny*nx), as numpy.fft.fft2 and numpy.fft.ifft2:
//     X[k,l] = Σ x[m,n] exp(-2πi(km/ny + ln/nx)).
//     Parseval: Σ|x|² = Σ|X|²/(ny*nx).
//   - ForwardReal returns the full ny*nx Hermitian spectrum (not a
//     half-spectrum), so real and complex spectra are interchangeable.
//     InverseReal returns the real part of Inverse.
//   - Shift and ShiftComplex are numpy's fftshift: zero frequency moves to
//     (ny/2, nx/2).
//
// # Plans, buffers and concurrency
//
// A Plan is made once per size and reused. It precomputes twiddle tables
// and owns its scratch buffers, so transforms allocate nothing. A Plan is
// therefore not safe for concurrent use: use one Plan per goroutine.
// Forward and Inverse may work in place (dst and src the same slice).
//
// # Algorithms
//
// Any size ≥ 1 is supported. Lengths whose prime factors are 2, 3 and 5
// use a self-sorting mixed-radix Stockham FFT (radices 2, 3, 4, 5, 8;
// Van Loan 1992, Computational Frameworks for the Fast Fourier Transform,
// ch. 1, the Stockham autosort framework); other lengths use Bluestein's chirp-z algorithm (Bluestein 1970,
// IEEE Trans. Audio Electroacoust. 18, 451) on a power-of-two transform.
// The 2-D transform does all columns at once as a batched 1-D transform
// (every butterfly runs over a whole row of contiguous values), then the
// rows in place. The real transforms pack two real rows into one complex
// row, transform only the nx/2+1 independent columns, and fill in the rest
// by Hermitian symmetry, at roughly half the cost.
//
// On amd64 CPUs with AVX2 and FMA the butterflies and the real-transform
// packing run in assembly kernels (kernels_amd64.s); elsewhere, or when
// built with the purego tag, portable Go code computes the same results.
// Both paths are tested against the direct DFT.
package fft
