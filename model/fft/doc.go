// Package fft computes 2-D discrete Fourier transforms of complex and real
// images for pdwave.
//
// Conventions:
//
//   - Images are row-major slices of length ny*nx with x fastest: element
//     (y, x) is at index y*nx+x. Spectra use the same layout, frequency
//     index (k, l) at k*nx+l, zero frequency at index 0.
//   - Forward is unnormalised with a negative exponent and Inverse carries
//     the factor 1/(ny*nx), as numpy.fft.fft2 and numpy.fft.ifft2:
//     X[k,l] = Σ x[m,n] exp(-2πi(km/ny + ln/nx)).
//   - ForwardReal returns the full ny*nx Hermitian spectrum (not a
//     half-spectrum), so real and complex spectra are interchangeable.
//   - Shift and ShiftComplex are fftshift: zero frequency moves to
//     (ny/2, nx/2).
//
// Any sizes ≥ 1 are supported. A Plan precomputes tables and owns scratch
// buffers, so transforms allocate nothing; a Plan is not safe for
// concurrent use — use one per goroutine.
package fft
