package simulate

import (
	"math"

	"pdwave/model/fft"
	"pdwave/model/optics"
)

// Image formation beyond the fit's model.
//
// The fit models the PSF with an N×N FFT of the pupil drawn on the N×N
// patch grid (pupil diameter r_c = D·N·p/λ pixels): its PSF is sampled at
// the camera pixel p but periodic with period N pixels, so the seeing halo
// and diversity wings beyond ±N/2 wrap around, and the aperture and
// wavefront are sampled only r_c times across the pupil. Bursts formed the
// same way fit the model exactly. With Config.Oversample = q the
// simulator instead draws the pupil on a qN×qN grid with diameter q·r_c
// pixels (pupil pixel D/(q·r_c), the wavefront sampled there), so the FFT of
// side qN still gives a PSF sampled at the camera pixel, λ/(qN·D/(q·r_c)) =
// p, but with support qN ≥ 2N; and it integrates each camera pixel over its
// area (box of one pixel, MTF sinc(fx)·sinc(fy) with f in cycles per pixel
// and sinc(f) = sin(πf)/(πf); the fit does not model it, but being the same
// in every frame and channel it only changes the object the fit
// recovers). q = 1 is the fit's own model (N×N PSF, no pixel integration),
// kept for regression comparisons.

// MaxOversample is the largest Config.Oversample accepted.
const MaxOversample = 4

// former convolves objects with the PSF pair of one frame on an m×m
// canvas; one per goroutine. PSFs are p×p (p = q·N), centred on pixel 0.
type former struct {
	p, m  int
	im    *optics.Imager
	plan  *fft.Plan
	phase []float64    // p*p scratch
	div   [2][]float64 // diversity phase of each channel (Simulator.fdiv, or with a channel offset)
	psf   [2][]float64
	buf   []complex128 // m*m
	sinc  []float64    // pixel MTF along one axis at the m canvas frequencies; nil for q = 1
}

func (s *Simulator) newFormer(m int) *former {
	p := s.fpupil.N
	f := &former{
		p: p, m: m,
		im:    optics.NewImager(s.fpupil),
		plan:  fft.NewPlan(m, m),
		phase: make([]float64, p*p),
		div:   s.fdiv,
		psf:   [2][]float64{make([]float64, p*p), make([]float64, p*p)},
		buf:   make([]complex128, m*m),
	}
	if s.q > 1 {
		f.sinc = pixelMTF(m)
	}
	return f
}

// pixelMTF returns the transfer function of a one-pixel box along one axis
// at the frequencies of an m-point DFT: sinc(k/m) for signed k, sinc(f) =
// sin(πf)/(πf) (the Fourier transform of a unit box; Goodman, Introduction
// to Fourier Optics).
func pixelMTF(m int) []float64 {
	out := make([]float64, m)
	for k := range out {
		f := float64(signedFreq(k, m)) / float64(m)
		out[k] = 1
		if f != 0 {
			out[k] = math.Sin(math.Pi*f) / (math.Pi * f)
		}
	}
	return out
}

// psfs computes the PSFs of both channels for the wavefront phase (p*p, on
// the imaging pupil grid). It allocates nothing.
func (f *former) psfs(s *Simulator, phase []float64) {
	for c := 0; c < 2; c++ {
		div := f.div[c]
		for _, i := range s.fpupil.Index {
			f.phase[i] = phase[i] + div[i]
		}
		f.im.PSF(f.psf[c], f.phase)
	}
}

// blurPair sets f.buf to o⊗s0 + i·o⊗s1 (cyclic on the m×m canvas) for the
// object spectrum objSpec and the current PSF pair, times the pixel MTF
// when it is in use: both PSFs are real, so one transform carries both
// (real part channel 1, imaginary part channel 2). The PSFs (p×p, centred
// on pixel 0) are embedded around pixel 0 of the canvas; the canvas must be
// at least p wider than the region read back for the result to be free of
// wrap-around. It allocates nothing.
func (f *former) blurPair(objSpec []complex128) {
	p, m := f.p, f.m
	clear(f.buf)
	for y := 0; y < p; y++ {
		dy := y
		if y >= p/2 {
			dy = y - p
		}
		row := wrap(dy, m) * m
		for x := 0; x < p; x++ {
			dx := x
			if x >= p/2 {
				dx = x - p
			}
			k := y*p + x
			f.buf[row+wrap(dx, m)] = complex(f.psf[0][k], f.psf[1][k])
		}
	}
	f.plan.Forward(f.buf, f.buf)
	if f.sinc == nil {
		for i, o := range objSpec {
			f.buf[i] *= o
		}
	} else {
		for y := 0; y < m; y++ {
			row := f.buf[y*m : y*m+m]
			os := objSpec[y*m : y*m+m]
			wy := f.sinc[y]
			for x, o := range os {
				row[x] *= o * complex(wy*f.sinc[x], 0)
			}
		}
	}
	f.plan.Inverse(f.buf, f.buf)
}

// canvasSide returns the side of an FFT canvas holding at least v pixels:
// the next power of two for q = 1 (the sizes used before oversampling, so
// q = 1 reproduces earlier bursts), else the next even 2^a·3^b·5^c, which
// model/fft transforms with its mixed-radix kernels.
func canvasSide(v, q int) int {
	if q == 1 {
		return nextPow2(v)
	}
	for m := v + v%2; ; m += 2 {
		r := m
		for _, f := range []int{2, 3, 5} {
			for r%f == 0 {
				r /= f
			}
		}
		if r == 1 {
			return m
		}
	}
}

func nextPow2(v int) int {
	p := 1
	for p < v {
		p *= 2
	}
	return p
}

// decimate writes into dst (n×n) every q-th sample of src (qn×qn) starting
// at pixel (0, 0): with both grids centred on pixel (side/2, side/2), coarse
// pixel (x, y) and fine pixel (qx, qy) are the same point of the pupil.
func decimate(dst, src []float64, n, q int) {
	qn := q * n
	for y := 0; y < n; y++ {
		row := src[q*y*qn:]
		for x := 0; x < n; x++ {
			dst[y*n+x] = row[q*x]
		}
	}
}
