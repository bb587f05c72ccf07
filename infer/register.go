package infer

import (
	"math"

	"gonum.org/v1/gonum/mat"

	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/pd"
)

// registrar measures frame-to-frame image motion by cross-correlation, to
// start the fit with the right tip/tilt. Large tilts (several pixels of
// motion across a granulation pattern of ~10 px cells) otherwise trap the
// optimiser in a neighbouring correlation peak. One per worker.
type registrar struct {
	n     int
	plan  *fft.Plan
	win   []float64
	spec  [][]complex128 // per frame spectrum of the reference channel
	ref   []complex128
	buf   []complex128
	cc    []float64
	shift [][2]float64
}

func newRegistrar(n, frames int, window float64) *registrar {
	r := &registrar{n: n, plan: fft.NewPlan(n, n), win: pd.Window(n, window)}
	r.spec = make([][]complex128, frames)
	for j := range r.spec {
		r.spec[j] = make([]complex128, n*n)
	}
	r.ref = make([]complex128, n*n)
	r.buf = make([]complex128, n*n)
	r.cc = make([]float64, n*n)
	r.shift = make([][2]float64, frames)
	return r
}

// shifts returns the (x, y) displacement in pixels of every frame of imgs
// (one channel, frames × N×N) relative to their common reference, burst
// mean removed. Two passes: against frame 0, then against the mean of the
// frames aligned by the first pass (shifts applied in Fourier space).
func (r *registrar) shifts(imgs [][]float64) [][2]float64 {
	n := r.n
	for j, im := range imgs {
		var m, ws float64
		for p, v := range im {
			m += r.win[p] * v
			ws += r.win[p]
		}
		m /= ws
		s := r.spec[j]
		for p, v := range im {
			s[p] = complex(r.win[p]*(v-m), 0)
		}
		r.plan.Forward(s, s)
	}
	copy(r.ref, r.spec[0])
	for pass := 0; pass < 2; pass++ {
		for j := range imgs {
			r.shift[j] = r.peak(r.spec[j])
		}
		if pass == 1 {
			break
		}
		// New reference: mean of the frames shifted onto frame 0.
		clear(r.ref)
		for j := range imgs {
			sx, sy := r.shift[j][0], r.shift[j][1]
			for y := 0; y < n; y++ {
				fy := float64(signed(y, n)) / float64(n)
				for x := 0; x < n; x++ {
					fx := float64(signed(x, n)) / float64(n)
					ph := 2 * math.Pi * (fx*sx + fy*sy) // undo a shift by (sx, sy)
					sn, cs := math.Sincos(ph)
					r.ref[y*n+x] += r.spec[j][y*n+x] * complex(cs, sn)
				}
			}
		}
	}
	var mx, my float64
	for _, s := range r.shift {
		mx += s[0]
		my += s[1]
	}
	mx /= float64(len(r.shift))
	my /= float64(len(r.shift))
	for j := range r.shift {
		r.shift[j][0] -= mx
		r.shift[j][1] -= my
	}
	return r.shift
}

func signed(k, n int) int {
	if k >= (n+1)/2 {
		return k - n
	}
	return k
}

// peak returns the displacement of the image with spectrum s relative to
// the reference: the maximum of the cross-correlation F⁻¹{s·ref*} within
// ±N/4, refined by a parabola through its neighbours on each axis.
func (r *registrar) peak(s []complex128) [2]float64 {
	n := r.n
	for i := range r.buf {
		r.buf[i] = s[i] * complex(real(r.ref[i]), -imag(r.ref[i]))
	}
	r.plan.InverseReal(r.cc, r.buf)
	lim := n / 4
	best, bx, by := math.Inf(-1), 0, 0
	for y := 0; y < n; y++ {
		sy := signed(y, n)
		if sy > lim || sy < -lim {
			continue
		}
		for x := 0; x < n; x++ {
			sx := signed(x, n)
			if sx > lim || sx < -lim {
				continue
			}
			if v := r.cc[y*n+x]; v > best {
				best, bx, by = v, x, y
			}
		}
	}
	at := func(x, y int) float64 { return r.cc[((y+n)%n)*n+(x+n)%n] }
	para := func(m, c, p float64) float64 {
		d := m - 2*c + p
		if d >= 0 {
			return 0
		}
		return 0.5 * (m - p) / d
	}
	dx := para(at(bx-1, by), best, at(bx+1, by))
	dy := para(at(bx, by-1), best, at(bx, by+1))
	return [2]float64{float64(signed(bx, n)) + dx, float64(signed(by, n)) + dy}
}

// tiltPerPixel returns the native coefficient vectors that displace the
// image by one pixel in x and in y: a Noll tilt a (Z2 = 2ρcosθ) is a phase
// ramp 2a·x/R (x, R in pupil pixels), and a ramp −2π s·x/N moves the image
// h = F⁻¹{P} by s pixels, so a = −π s R / N (Z3 alike in y). The native
// vector is ToNoll⁻¹ applied to that Noll vector.
func tiltPerPixel(b *modes.Basis) (vx, vy []float64) {
	c := b.Count
	vx, vy = make([]float64, c), make([]float64, c)
	a := -math.Pi * b.Radius / float64(b.N)
	if b.ToNoll == nil {
		vx[0], vy[1] = a, a
		return vx, vy
	}
	var inv mat.Dense
	if err := inv.Inverse(b.ToNoll); err != nil {
		for k := 0; k < c; k++ { // orthogonal ToNoll: inverse = transpose
			vx[k], vy[k] = a*b.ToNoll.At(0, k), a*b.ToNoll.At(1, k)
		}
		return vx, vy
	}
	for k := 0; k < c; k++ {
		vx[k], vy[k] = a*inv.At(k, 0), a*inv.At(k, 1)
	}
	return vx, vy
}
