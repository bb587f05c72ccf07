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
//
// Method: both images are mean-subtracted and tapered at the edges (cosine
// taper over 1/8 of each side), their cross-correlation c(τ) = Σ ref(x)·img(x+τ)
// is computed with FFTs, the integer peak is refined by a parabola through
// the peak and its neighbours along each axis, and then by Newton steps on the
// band-limited (Fourier-interpolated) cross-correlation
// c(τ) = Re Σ_u conj(R(u))·I(u)·exp(2πi u·τ/n), whose gradient and Hessian
// follow analytically from the spectrum. The result is exact for a band-limited
// cyclic shift and biased only by edge effects otherwise. Shifts larger than a
// quarter of the image side are not expected and are reported as an error, as
// are constant images. Inputs are not modified.
func MeasureShift(ref, img []float64, nx, ny int) (dx, dy float64, err error) {
	if nx < 4 || ny < 4 || len(ref) != nx*ny || len(img) != nx*ny {
		return 0, 0, fmt.Errorf("restore: MeasureShift: need two %d×%d images of length %d (have %d, %d)", nx, ny, nx*ny, len(ref), len(img))
	}
	// The edge taper biases a single estimate towards zero (the windows of
	// the two images overlap less as the shift grows), so the estimate is
	// iterated: move img back by the shift found so far and measure the
	// remainder.
	dx, dy, err = restoreShiftOnce(ref, img, nx, ny)
	if err != nil || (dx == 0 && dy == 0) {
		return dx, dy, err
	}
	s := NewShifter(nx, ny)
	back := make([]float64, nx*ny)
	for iter := 0; iter < 4; iter++ {
		s.Shift(back, img, -dx, -dy)
		rx, ry, err := restoreShiftOnce(ref, back, nx, ny)
		if err != nil {
			return dx, dy, err
		}
		dx += rx
		dy += ry
		if math.Abs(rx)+math.Abs(ry) < 1e-4 {
			break
		}
	}
	return dx, dy, nil
}

func restoreShiftOnce(ref, img []float64, nx, ny int) (dx, dy float64, err error) {
	plan := fft.NewPlan(ny, nx)
	a := restoreTapered(ref, nx, ny)
	b := restoreTapered(img, nx, ny)
	if a == nil || b == nil {
		return 0, 0, errors.New("restore: MeasureShift: image has no contrast")
	}
	A := make([]complex128, nx*ny)
	B := make([]complex128, nx*ny)
	plan.ForwardReal(A, a)
	plan.ForwardReal(B, b)
	X := make([]complex128, nx*ny)
	for i := range X {
		X[i] = cmplx.Conj(A[i]) * B[i]
	}
	c := make([]float64, nx*ny)
	plan.InverseReal(c, X)
	best, bi := math.Inf(-1), 0
	for i, v := range c {
		if v > best {
			best, bi = v, i
		}
	}
	px, py := bi%nx, bi/nx
	at := func(x, y int) float64 { return c[((y%ny+ny)%ny)*nx+(x%nx+nx)%nx] }
	sx := restoreParabola(at(px-1, py), at(px, py), at(px+1, py))
	sy := restoreParabola(at(px, py-1), at(px, py), at(px, py+1))
	// Signed integer position.
	ix, iy := px, py
	if ix > nx/2 {
		ix -= nx
	}
	if iy > ny/2 {
		iy -= ny
	}
	dx, dy = float64(ix)+sx, float64(iy)+sy
	// Newton refinement on the Fourier-interpolated correlation.
	ex, ey := make([]complex128, nx), make([]complex128, ny)
	fx, fy := make([]float64, nx), make([]float64, ny)
	for l := 0; l < nx; l++ {
		fx[l] = restoreFreq(l, nx)
	}
	for k := 0; k < ny; k++ {
		fy[k] = restoreFreq(k, ny)
	}
	for iter := 0; iter < 8; iter++ {
		for l := range ex {
			ex[l] = cmplx.Rect(1, 2*math.Pi*fx[l]*dx)
		}
		for k := range ey {
			ey[k] = cmplx.Rect(1, 2*math.Pi*fy[k]*dy)
		}
		var gx, gy, hxx, hyy, hxy float64
		for k := 0; k < ny; k++ {
			row := X[k*nx : (k+1)*nx]
			wy := 2 * math.Pi * fy[k]
			for l, v := range row {
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
		det := hxx*hyy - hxy*hxy
		if !(hxx < 0 && det > 0) { // not at a maximum: keep the parabolic estimate
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
	if math.Abs(dx) > float64(nx)/4 || math.Abs(dy) > float64(ny)/4 {
		return dx, dy, fmt.Errorf("restore: channels offset by (%.1f, %.1f) pixels, more than a quarter of the field; check the channel order", dx, dy)
	}
	return dx, dy, nil
}

// restoreFreq returns the signed frequency (cycles per sample) of DFT index k
// of length n.
func restoreFreq(k, n int) float64 {
	if 2*k > n {
		k -= n
	} else if 2*k == n {
		return 0 // Nyquist term: ambiguous sign, contributes no slope
	}
	return float64(k) / float64(n)
}

// restoreParabola returns the vertex offset in (−0.5, 0.5) of the parabola
// through (−1, a), (0, b), (1, c).
func restoreParabola(a, b, c float64) float64 {
	den := a - 2*b + c
	if den >= 0 {
		return 0
	}
	s := 0.5 * (a - c) / den
	return math.Max(-0.5, math.Min(0.5, s))
}

// restoreTapered returns a mean-subtracted copy of im multiplied by a
// separable cosine edge taper over 1/8 of each side, or nil if im is constant.
func restoreTapered(im []float64, nx, ny int) []float64 {
	var mean float64
	for _, v := range im {
		mean += v
	}
	mean /= float64(len(im))
	wx, wy := restoreTaper(nx), restoreTaper(ny)
	out := make([]float64, len(im))
	var pow float64
	for y := 0; y < ny; y++ {
		for x := 0; x < nx; x++ {
			v := (im[y*nx+x] - mean) * wx[x] * wy[y]
			out[y*nx+x] = v
			pow += v * v
		}
	}
	if pow == 0 {
		return nil
	}
	return out
}

// restoreTaper is a 1-D window equal to 1 in the middle and falling as a
// raised cosine to 0 over n/8 samples at each end.
func restoreTaper(n int) []float64 {
	w := make([]float64, n)
	m := n / 8
	for i := range w {
		w[i] = 1
		d := min(i, n-1-i)
		if d < m {
			w[i] = 0.5 - 0.5*math.Cos(math.Pi*(float64(d)+0.5)/float64(m))
		}
	}
	return w
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

func restoreRamp(r []complex128, d float64) {
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
func (s *Shifter) Shift(dst, src []float64, dx, dy float64) {
	nx, ny := s.nx, s.ny
	if len(dst) != nx*ny || len(src) != nx*ny {
		panic("restore: Shifter.Shift: wrong image length")
	}
	if dx != s.rdx {
		restoreRamp(s.rampX, dx)
		s.rdx = dx
	}
	if dy != s.rdy {
		restoreRamp(s.rampY, dy)
		s.rdy = dy
	}
	t := s.tmp
	for y := 0; y < ny; y++ {
		row := src[y*nx : (y+1)*nx]
		for x, v := range row {
			s.bx[x] = complex(v, 0)
			s.bx[2*nx-1-x] = complex(v, 0)
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
			dst[y*nx+x] = real(s.by[y])
		}
	}
}
