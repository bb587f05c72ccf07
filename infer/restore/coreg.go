package restore

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"

	"pdwave/model/fft"
)

// MeasureShift returns the sub-pixel translation (dx, dy), in pixels, of img
// relative to ref, both nx×ny row-major images: img(x, y) ≈ ref(x−dx, y−dy).
// It is MeasureShiftFrames with one frame each.
func MeasureShift(ref, img []float64, nx, ny int) (dx, dy float64, err error) {
	return MeasureShiftFrames([][]float64{ref}, [][]float64{img}, nx, ny)
}

// MeasureShiftFrames returns the sub-pixel translation (dx, dy), in pixels,
// of the images img[j] relative to ref[j] (pairs of simultaneous nx×ny
// frames sharing one unknown offset): img[j](x, y) ≈ ref[j](x−dx, y−dy)
// blurred by another kernel with the same centroid.
//
// Method: each image is mean-subtracted and tapered at the edges (cosine
// taper over 1/8 of each side); the cross-spectra conj(R_j)·I_j are summed
// over the pairs, so frame-to-frame image motion common to both channels
// cancels pair by pair, and weighted by a Gaussian low-pass (see
// shiftLowPass: the channels are blurred by different kernels). The
// integer peak of the resulting cross-correlation is refined by a parabola
// through the peak and its neighbours along each axis, then by Newton steps
// on the Fourier-interpolated correlation c(τ) = Re Σ_u X(u)·exp(2πi u·τ/n),
// whose gradient and Hessian follow analytically from the spectrum. The edge
// taper biases a single estimate towards zero (the windowed regions differ),
// so the estimate is iterated with the taper of img moved by the shift found
// so far, until the correction is below 1e-4 px. Shifts larger than a
// quarter of the image side and images without contrast are errors. Inputs
// are not modified.
func MeasureShiftFrames(ref, img [][]float64, nx, ny int) (dx, dy float64, err error) {
	return measureShift(ref, img, nx, ny, shiftLowPass)
}

// measureShift is MeasureShiftFrames with the low-pass frequency as a
// parameter; lowpass ≤ 0 means none (for images blurred alike: the peak of
// the plain cross-correlation is then the least-squares alignment).
func measureShift(ref, img [][]float64, nx, ny int, lowpass float64) (dx, dy float64, err error) {
	if nx < 4 || ny < 4 || len(ref) == 0 || len(ref) != len(img) {
		return 0, 0, fmt.Errorf("restore: MeasureShift: need pairs of %d×%d images (have %d and %d)", nx, ny, len(ref), len(img))
	}
	for j := range ref {
		if len(ref[j]) != nx*ny || len(img[j]) != nx*ny {
			return 0, 0, fmt.Errorf("restore: MeasureShift: image pair %d has %d and %d pixels, want %d", j, len(ref[j]), len(img[j]), nx*ny)
		}
	}
	m := &shiftMeter{nx: nx, ny: ny, plan: fft.NewPlan(ny, nx), lowpass: lowpass,
		A: make([][]complex128, len(ref)), B: make([]complex128, nx*ny), X: make([]complex128, nx*ny),
		c: make([]float64, nx*ny), buf: make([]float64, nx*ny)}
	for j, r := range ref {
		m.A[j] = make([]complex128, nx*ny)
		if !m.taper(m.buf, r, 0, 0) {
			return 0, 0, errors.New("restore: MeasureShift: reference image has no contrast")
		}
		m.plan.ForwardReal(m.A[j], m.buf)
	}
	for iter := 0; iter < 6; iter++ {
		clear(m.X)
		for j, im := range img {
			if !m.taper(m.buf, im, dx, dy) {
				return 0, 0, errors.New("restore: MeasureShift: image has no contrast")
			}
			m.plan.ForwardReal(m.B, m.buf)
			for i, a := range m.A[j] {
				m.X[i] += cmplx.Conj(a) * m.B[i]
			}
		}
		rx, ry := m.peak()
		dx, dy = rx, ry
		if iter > 0 && math.Abs(rx-m.lastX)+math.Abs(ry-m.lastY) < 1e-4 {
			break
		}
		m.lastX, m.lastY = rx, ry
		if math.Abs(dx) > float64(nx)/4 || math.Abs(dy) > float64(ny)/4 {
			break
		}
	}
	if math.Abs(dx) > float64(nx)/4 || math.Abs(dy) > float64(ny)/4 {
		return dx, dy, fmt.Errorf("restore: channels offset by (%.1f, %.1f) pixels, more than a quarter of the field; check the channel order", dx, dy)
	}
	return dx, dy, nil
}

// shiftMeter measures the offset between two sets of frames by the peak
// of their low-passed cross-correlation, with its plan and buffers.
type shiftMeter struct {
	nx, ny       int
	plan         *fft.Plan
	A            [][]complex128
	B, X         []complex128
	c, buf       []float64
	lastX, lastY float64
	lowpass      float64
}

// taper writes the mean-subtracted image multiplied by the edge taper moved
// by (dx, dy) into dst; false if the result has no power.
func (m *shiftMeter) taper(dst, im []float64, dx, dy float64) bool {
	nx, ny := m.nx, m.ny
	var mean float64
	for _, v := range im {
		mean += v
	}
	mean /= float64(len(im))
	var pow float64
	for y := 0; y < ny; y++ {
		wy := taperAt(float64(y)-dy, ny)
		for x := 0; x < nx; x++ {
			v := (im[y*nx+x] - mean) * wy * taperAt(float64(x)-dx, nx)
			dst[y*nx+x] = v
			pow += v * v
		}
	}
	return pow > 0
}

// taperAt is a 1-D window over [0, n−1] equal to 1 in the middle and
// falling as a raised cosine to 0 over n/8 samples at each end, evaluated at
// the continuous position t (0 outside).
func taperAt(t float64, n int) float64 {
	m := float64(n / 8)
	d := math.Min(t+0.5, float64(n)-0.5-t)
	if d <= 0 {
		return 0
	}
	if d >= m {
		return 1
	}
	return 0.5 - 0.5*math.Cos(math.Pi*d/m)
}

// peak locates the maximum of the low-passed correlation of m.X (absolute
// shift in pixels): the best pixel with a parabola through its
// neighbours, refined by Newton steps on the cross-spectrum.
func (m *shiftMeter) peak() (dx, dy float64) {
	m.lowPass()
	dx, dy = m.gridPeak()
	return m.refine(dx, dy)
}

// lowPass weights the cross-spectrum m.X by exp(−(f/m.lowpass)²) (none
// when m.lowpass ≤ 0).
func (m *shiftMeter) lowPass() {
	nx, ny := m.nx, m.ny
	for k := 0; k < ny && m.lowpass > 0; k++ {
		fy := dftFreq(k, ny)
		for l := 0; l < nx; l++ {
			f := math.Hypot(dftFreq(l, nx), fy) / m.lowpass
			m.X[k*nx+l] *= complex(math.Exp(-f*f), 0)
		}
	}
}

// gridPeak returns the position of the correlation's largest pixel,
// signed (wrapped to (−n/2, n/2]), with the sub-pixel vertex of the
// parabola through it and its neighbours along each axis.
func (m *shiftMeter) gridPeak() (dx, dy float64) {
	nx, ny := m.nx, m.ny
	c := m.c
	m.plan.InverseReal(c, m.X)
	best, bi := math.Inf(-1), 0
	for i, v := range c {
		if v > best {
			best, bi = v, i
		}
	}
	px, py := bi%nx, bi/nx
	at := func(x, y int) float64 { return c[((y%ny+ny)%ny)*nx+(x%nx+nx)%nx] }
	sx := parabolaVertex(at(px-1, py), at(px, py), at(px+1, py))
	sy := parabolaVertex(at(px, py-1), at(px, py), at(px, py+1))
	ix, iy := px, py
	if ix > nx/2 {
		ix -= nx
	}
	if iy > ny/2 {
		iy -= ny
	}
	return float64(ix) + sx, float64(iy) + sy
}

// refine maximises the continuous correlation Re Σ X·e^{2πi(fx·dx+fy·dy)}
// from (dx, dy) by up to 8 Newton steps, stopping where the Hessian is not
// that of a maximum or a step exceeds a pixel.
func (m *shiftMeter) refine(dx, dy float64) (float64, float64) {
	nx, ny := m.nx, m.ny
	ex, ey := make([]complex128, nx), make([]complex128, ny)
	fx, fy := make([]float64, nx), make([]float64, ny)
	for l := 0; l < nx; l++ {
		fx[l] = dftFreq(l, nx)
	}
	for k := 0; k < ny; k++ {
		fy[k] = dftFreq(k, ny)
	}
	for iter := 0; iter < 8; iter++ {
		for l := range ex {
			ex[l] = cmplx.Rect(1, 2*math.Pi*fx[l]*dx)
		}
		for k := range ey {
			ey[k] = cmplx.Rect(1, 2*math.Pi*fy[k]*dy)
		}
		gx, gy, hxx, hyy, hxy := m.derivatives(ex, ey, fx, fy)
		det := hxx*hyy - hxy*hxy
		if !(hxx < 0 && det > 0) { // not at a maximum: keep the estimate
			break
		}
		stepx := -(hyy*gx - hxy*gy) / det
		stepy := -(hxx*gy - hxy*gx) / det
		if math.Abs(stepx) > 1 || math.Abs(stepy) > 1 {
			break
		}
		dx += stepx
		dy += stepy
		if math.Abs(stepx)+math.Abs(stepy) < 1e-6 {
			break
		}
	}
	return dx, dy
}

// derivatives returns the gradient and Hessian of the continuous
// correlation at the shift whose phase factors along x and y are ex, ey
// (frequencies fx, fy).
func (m *shiftMeter) derivatives(ex, ey []complex128, fx, fy []float64) (gx, gy, hxx, hyy, hxy float64) {
	nx, ny := m.nx, m.ny
	for k := 0; k < ny; k++ {
		row := m.X[k*nx : (k+1)*nx]
		wy := 2 * math.Pi * fy[k]
		for l, v := range row {
			if v == 0 {
				continue
			}
			z := v * ex[l] * ey[k]
			wx := 2 * math.Pi * fx[l]
			re, im := real(z), imag(z)
			// d/dτ Re(z e^{iωτ}) = −ω Im, d² = −ω² Re.
			gx -= wx * im
			gy -= wy * im
			hxx -= wx * wx * re
			hyy -= wy * wy * re
			hxy -= wx * wy * re
		}
	}
	return gx, gy, hxx, hyy, hxy
}

// shiftLowPass is the 1/e frequency (cycles per pixel) of the Gaussian
// weight on the cross-spectrum in MeasureShiftFrames: a spatial smoothing of
// the correlation with σ = 1/(√2·π·shiftLowPass) ≈ 19 px. The defocused
// image is the focused one blurred by a ring-shaped (defocus) kernel about
// 8 λ/D ≈ 16 px across at one wave, and the bare correlation of such a pair
// has a dip, not a peak, at the true offset; smoothed well beyond the kernel
// size the correlation peaks near the common centroid of the two kernels
// (which the diversity does not move). Measured on simulated 192 px bursts
// (8 frames, D/r0 = 5, 1 wave): bias about 0.1 px; 0.025 gave 0.15 px and
// 0.006 was noise-dominated.
const shiftLowPass = 0.012

// dftFreq returns the signed frequency (cycles per sample) of DFT index k
// of length n.
func dftFreq(k, n int) float64 {
	if 2*k > n {
		k -= n
	} else if 2*k == n {
		return 0 // Nyquist term: ambiguous sign, contributes no slope
	}
	return float64(k) / float64(n)
}

// parabolaVertex returns the vertex offset in (−0.5, 0.5) of the parabola
// through (−1, a), (0, b), (1, c).
func parabolaVertex(a, b, c float64) float64 {
	den := a - 2*b + c
	if den >= 0 {
		return 0
	}
	s := 0.5 * (a - c) / den
	return math.Max(-0.5, math.Min(0.5, s))
}

// Shifter translates images by sub-pixel amounts with band-limited (Fourier)
// interpolation. The image is extended by mirror reflection to twice its size
// along each axis before the phase ramp is applied, so the edges are
// continuous and the shift does not ring from the wrap-around; the shift is
// separable (rows, then columns). A Shifter owns its plans and buffers and is
// not safe for concurrent use.
type Shifter struct {
	nx, ny   int
	px, py   *fft.Plan
	bx, by   []complex128
	rampX    []complex128
	rampY    []complex128
	rdx, rdy float64
	tmp      []float64
}

// NewShifter returns a Shifter for nx×ny images. It panics if nx or ny < 1.
func NewShifter(nx, ny int) *Shifter {
	if nx < 1 || ny < 1 {
		panic("restore: NewShifter: non-positive size")
	}
	return &Shifter{
		nx: nx, ny: ny,
		px: fft.NewPlan(1, 2*nx), py: fft.NewPlan(1, 2*ny),
		bx: make([]complex128, 2*nx), by: make([]complex128, 2*ny),
		rampX: make([]complex128, 2*nx), rampY: make([]complex128, 2*ny),
		rdx: math.NaN(), rdy: math.NaN(),
		tmp: make([]float64, nx*ny),
	}
}

// shiftRamp fills r with the phase ramp exp(−2πi·f·d) of a shift by d
// samples over the DFT frequencies f of len(r) (the Fourier shift theorem).
func shiftRamp(r []complex128, d float64) {
	n := len(r)
	for k := range r {
		f := float64(k) / float64(n)
		if 2*k > n {
			f -= 1
		} else if 2*k == n {
			r[k] = complex(math.Cos(math.Pi*d), 0) // symmetric Nyquist term keeps the result real
			continue
		}
		r[k] = cmplx.Rect(1, -2*math.Pi*f*d)
	}
}

// Shift sets dst(x, y) = src(x−dx, y−dy) (dx, dy in pixels). dst and src have
// length nx·ny and may alias. It panics on wrong lengths.
func (s *Shifter) Shift(dst, src []float64, dx, dy float64) { shift(s, dst, src, dx, dy) }

// Shift32 is Shift for float32 images (computed in float64, a row or
// column at a time).
func (s *Shifter) Shift32(dst, src []float32, dx, dy float64) { shift(s, dst, src, dx, dy) }

func shift[T float32 | float64](s *Shifter, dst, src []T, dx, dy float64) {
	nx, ny := s.nx, s.ny
	if len(dst) != nx*ny || len(src) != nx*ny {
		panic("restore: Shifter.Shift: wrong image length")
	}
	if dx != s.rdx {
		shiftRamp(s.rampX, dx)
		s.rdx = dx
	}
	if dy != s.rdy {
		shiftRamp(s.rampY, dy)
		s.rdy = dy
	}
	t := s.tmp
	for y := 0; y < ny; y++ {
		row := src[y*nx : (y+1)*nx]
		for x, v := range row {
			s.bx[x] = complex(float64(v), 0)
			s.bx[2*nx-1-x] = complex(float64(v), 0)
		}
		s.px.Forward(s.bx, s.bx)
		for k := range s.bx {
			s.bx[k] *= s.rampX[k]
		}
		s.px.Inverse(s.bx, s.bx)
		for x := 0; x < nx; x++ {
			t[y*nx+x] = real(s.bx[x])
		}
	}
	for x := 0; x < nx; x++ {
		for y := 0; y < ny; y++ {
			v := complex(t[y*nx+x], 0)
			s.by[y] = v
			s.by[2*ny-1-y] = v
		}
		s.py.Forward(s.by, s.by)
		for k := range s.by {
			s.by[k] *= s.rampY[k]
		}
		s.py.Inverse(s.by, s.by)
		for y := 0; y < ny; y++ {
			dst[y*nx+x] = T(real(s.by[y]))
		}
	}
}
