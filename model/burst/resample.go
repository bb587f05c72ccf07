package burst

import (
	"math"
	"math/cmplx"

	"pdwave/model/fft"
)

// resampler moves channel-2 frames of one size onto channel 1's pixel grid
// (see Geometry): out(p) = in(c + m·(p − c) + d), separably along x and y.
//
// With magnification 1 the shift is band-limited (Fourier) interpolation:
// each row and column is mirror-extended to twice its length (so the
// periodic extension is continuous and the shift does not ring from the
// wrap-around), multiplied by the phase ramp exp(−2πi k d/L) (the shift
// theorem of the discrete Fourier transform; Bracewell, The Fourier
// Transform and Its Applications, ch. 6) and transformed back; the
// Nyquist term takes cos(π d) so the result stays real. Band-limited
// interpolation changes no spatial frequency's amplitude, which matters
// for phase diversity: the two channels must keep their own blur.
//
// With magnification ≠ 1 the mapping is not a shift, and the samples are
// taken by cubic convolution (Keys 1981, IEEE Trans. ASSP 29, 1153, eq. 15
// with a = −1/2), offset and magnification in one interpolation, with
// indices beyond the frame reflected about its edges (half-sample
// symmetric). Keys' kernel attenuates frequencies near Nyquist slightly
// (a loss that varies with the sub-pixel position), so a magnification
// costs channel 2 a little high-frequency power; with magnifications
// within 0.2 % of 1 the remapping moves pixels by at most 1 px per
// 1000 px from the centre.
type resampler struct {
	nx, ny int
	g      Geometry
	plans  [2]*fft.Plan
	ramps  [2][]complex128
	buf    []complex128
	line   []float64 // source copy of one row or column
	col    []float64 // one column
}

func newResampler(nx, ny int, g Geometry) *resampler {
	r := &resampler{nx: nx, ny: ny, g: g, buf: make([]complex128, 2*max(nx, ny)), line: make([]float64, max(nx, ny)), col: make([]float64, ny)}
	if m := g.Magnification; m == 0 || m == 1 {
		for a, n := range []int{nx, ny} {
			r.plans[a] = fft.NewPlan(1, 2*n)
			r.ramps[a] = shiftRamp(2*n, []float64{g.OffsetX, g.OffsetY}[a])
		}
	}
	return r
}

// shiftRamp returns the n phase factors that move a periodic sequence of
// length n by −d samples: out(x) = in(x + d).
func shiftRamp(n int, d float64) []complex128 {
	r := make([]complex128, n)
	for k := range r {
		f := float64(k) / float64(n)
		switch {
		case 2*k == n:
			r[k] = complex(math.Cos(math.Pi*d), 0)
			continue
		case 2*k > n:
			f--
		}
		r[k] = cmplx.Rect(1, 2*math.Pi*f*d)
	}
	return r
}

// apply resamples the nx×ny frame im in place.
func (r *resampler) apply(im []float64) {
	nx, ny := r.nx, r.ny
	for y := 0; y < ny; y++ {
		r.line1D(im[y*nx:(y+1)*nx], 0)
	}
	col := r.col
	for x := 0; x < nx; x++ {
		for y := range col {
			col[y] = im[y*nx+x]
		}
		r.line1D(col, 1)
		for y := range col {
			im[y*nx+x] = col[y]
		}
	}
}

// line1D resamples one row (axis 0) or column (axis 1) in place.
func (r *resampler) line1D(v []float64, axis int) {
	n := len(v)
	d := []float64{r.g.OffsetX, r.g.OffsetY}[axis]
	if p := r.plans[axis]; p != nil {
		b := r.buf[:2*n]
		for i, x := range v {
			b[i], b[2*n-1-i] = complex(x, 0), complex(x, 0)
		}
		p.Forward(b, b)
		for k, w := range r.ramps[axis] {
			b[k] *= w
		}
		p.Inverse(b, b)
		for i := range v {
			v[i] = real(b[i])
		}
		return
	}
	src := r.line[:n]
	copy(src, v)
	c, m := float64(n-1)/2, r.g.Magnification
	for i := range v {
		v[i] = cubicAt(src, c+m*(float64(i)-c)+d)
	}
}

// cubicAt returns the cubic-convolution interpolant of v at position t
// (0-based sample positions), Keys 1981 eq. 15 with a = −1/2, reflecting
// indices beyond the ends (half-sample symmetric).
func cubicAt(v []float64, t float64) float64 {
	i0 := int(math.Floor(t))
	s := t - float64(i0)
	var sum float64
	for k := -1; k <= 2; k++ {
		sum += keys(float64(k)-s) * v[reflect(i0+k, len(v))]
	}
	return sum
}

// keys is the cubic convolution kernel of Keys 1981 (eq. 15, a = −1/2).
func keys(x float64) float64 {
	x = math.Abs(x)
	switch {
	case x <= 1:
		return (1.5*x-2.5)*x*x + 1
	case x < 2:
		return ((-0.5*x+2.5)*x-4)*x + 2
	}
	return 0
}

// reflect maps index i onto 0..n−1 by half-sample symmetric reflection
// (…, 1, 0 | 0, 1, …, n−1 | n−1, n−2, …).
func reflect(i, n int) int {
	p := 2 * n
	i %= p
	if i < 0 {
		i += p
	}
	if i >= n {
		i = p - 1 - i
	}
	return i
}
