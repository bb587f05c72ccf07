package optics

import (
	"fmt"
	"math"

	"pdwave/model/fft"
	"pdwave/model/modes"
)

// Pupil is the aperture transmission sampled on the N×N grid shared with
// the image patches (README "Methods"): centre pixel (N/2, N/2), diameter
// r_c = D·N·p/λ pixels, so that its autocorrelation (the OTF) fills radius
// r_c ≤ N/2 (Goodman, Introduction to Fourier Optics).
type Pupil struct {
	N      int
	Radius float64   // pixels = r_c/2 (pupil diameter r_c pixels)
	Amp    []float64 // N*N transmission in [0,1], centre (N/2,N/2)
	Index  []int     // indices with Amp > 0, increasing

	// Telescope is the telescope the pupil was drawn for.
	Telescope Telescope
}

// NewPupil draws the pupil of t on an n×n grid with a hard edge: a pixel
// transmits (Amp = 1) if its centre has ρ ≤ 1, ρ ≥ Obscuration and lies
// outside every spider vane, with ρ = hypot(x−N/2, y−N/2)/Radius — the same
// ρ ≤ 1 rule as modes.New, so basis modes and pupil cover the same pixels.
// It runs CheckSampling and returns its error for under-sampled data, and an
// error if the pupil is smaller than one pixel in radius or transmits nothing.
func NewPupil(t Telescope, n int) (*Pupil, error) {
	return NewPupilSubsampled(t, n, 1)
}

// NewPupilSubsampled is NewPupil with an anti-aliased edge: each pixel's
// transmission is the fraction of sub×sub sample points inside the aperture
// (sub = 1 is NewPupil). Edge pixels may then have fractional transmission,
// and a few with centres just outside ρ = 1 may transmit where modes.Basis
// modes are zero. It returns an error for sub < 1 or sub > 64.
//
// The grey edge is the pupil convolved with a one-pixel box, which smooths the
// OTF's cusp at zero frequency: measured against the clear-aperture MTF at
// R = 60 px, the hard edge is accurate to 1.2e-3 and the grey edge (8×8) to
// 5e-3. Prefer the hard edge; use sub-sampling for vanes thinner than a pixel.
//
// Spider vanes run radially from the centre at angles 2πk/Spiders (k = 0..),
// angle measured from the +x axis towards +y, each SpiderWidth wide.
func NewPupilSubsampled(t Telescope, n, sub int) (*Pupil, error) {
	if err := t.CheckSampling(n); err != nil {
		return nil, err
	}
	if sub < 1 || sub > 64 {
		return nil, fmt.Errorf("pupil: sub-sampling %d outside [1, 64]", sub)
	}
	radius := t.CutoffRadius(n) / 2
	if radius < 1 {
		return nil, fmt.Errorf("pupil: radius %.2f px is below one pixel; use a larger patch (N = %d) or finer pixels", radius, n)
	}
	p := &Pupil{N: n, Radius: radius, Amp: make([]float64, n*n), Telescope: t}
	g := pupilGeom{
		r:     radius,
		eps:   t.Obscuration * radius,
		halfW: t.SpiderWidth / t.Diameter * radius, // width in px = w/D · 2R, halved
	}
	for k := 0; k < t.Spiders; k++ {
		s, c := math.Sincos(2 * math.Pi * float64(k) / float64(t.Spiders))
		g.vanes = append(g.vanes, [2]float64{c, s})
	}
	c := float64(n / 2)
	const reach = 0.7072 // > half the pixel diagonal
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			dx, dy := float64(x)-c, float64(y)-c
			var a float64
			if sub == 1 || !g.nearEdge(dx, dy, reach) {
				if g.inside(dx, dy) {
					a = 1
				}
			} else {
				var cnt int
				for i := 0; i < sub; i++ {
					oy := (float64(i)+0.5)/float64(sub) - 0.5
					for k := 0; k < sub; k++ {
						ox := (float64(k)+0.5)/float64(sub) - 0.5
						if g.inside(dx+ox, dy+oy) {
							cnt++
						}
					}
				}
				a = float64(cnt) / float64(sub*sub)
			}
			if a > 0 {
				p.Amp[y*n+x] = a
				p.Index = append(p.Index, y*n+x)
			}
		}
	}
	if len(p.Index) == 0 {
		return nil, fmt.Errorf("pupil: no pixel transmits (radius %.2f px, obscuration %g)", radius, t.Obscuration)
	}
	return p, nil
}

type pupilGeom struct {
	r, eps, halfW float64
	vanes         [][2]float64 // unit vectors along each vane
}

// inside reports whether point (dx, dy) (pixels from the centre) transmits.
// It uses the ρ = hypot/Radius ≤ 1 test exactly as modes.New does, so
// hard-edge pupils and bases agree pixel for pixel.
func (g *pupilGeom) inside(dx, dy float64) bool {
	rho := math.Hypot(dx, dy) / g.r
	if rho > 1 {
		return false
	}
	if rho*g.r < g.eps {
		return false
	}
	for _, u := range g.vanes {
		along := dx*u[0] + dy*u[1]
		across := -dx*u[1] + dy*u[0]
		if along >= 0 && math.Abs(across) <= g.halfW {
			return false
		}
	}
	return true
}

// nearEdge reports whether any aperture edge passes within d pixels of (dx, dy).
func (g *pupilGeom) nearEdge(dx, dy, d float64) bool {
	r := math.Hypot(dx, dy)
	if math.Abs(r-g.r) <= d || (g.eps > 0 && math.Abs(r-g.eps) <= d) {
		return true
	}
	for _, u := range g.vanes {
		along := dx*u[0] + dy*u[1]
		across := -dx*u[1] + dy*u[0]
		if along >= -d && math.Abs(math.Abs(across)-g.halfW) <= d {
			return true
		}
		if along >= -d && math.Abs(across) <= g.halfW+d && along <= d {
			return true // vane root
		}
	}
	return false
}

// Area returns Σ Amp² in pixels (the transmitted power of a unit plane wave).
func (p *Pupil) Area() float64 {
	var s float64
	for _, i := range p.Index {
		s += p.Amp[i] * p.Amp[i]
	}
	return s
}

// Defocus writes into dst (length N*N) the diversity phase map, in rad, of a
// defocus of pvWaves waves peak-to-valley: DefocusCoefficient(pvWaves)·Z4 with
// Z4 = √3(2ρ²−1) (Noll 1976), on every transmitting pixel (Amp > 0; for an
// anti-aliased pupil this includes edge pixels just beyond ρ = 1, where the
// polynomial is extended) and 0 elsewhere. It panics if len(dst) != N*N.
func (p *Pupil) Defocus(dst []float64, pvWaves float64) {
	if len(dst) != p.N*p.N {
		panic(fmt.Sprintf("optics: Defocus dst length %d, want %d", len(dst), p.N*p.N))
	}
	a := DefocusCoefficient(pvWaves) * math.Sqrt(3)
	for i := range dst {
		dst[i] = 0
	}
	c := float64(p.N / 2)
	for _, i := range p.Index {
		dx, dy := float64(i%p.N)-c, float64(i/p.N)-c
		rho := math.Hypot(dx, dy) / p.Radius
		dst[i] = a * modes.Radial(2, 0, rho)
	}
}

// Imager forms the PSF and OTF of one pupil for given phase maps (Fraunhofer
// imaging, Goodman, Introduction to Fourier Optics: amplitude PSF the
// inverse transform of the pupil field, PSF its squared modulus, OTF the
// PSF's transform). It owns an FFT plan and buffers: after NewImager its
// methods allocate nothing. An Imager is not safe for concurrent use; make
// one per goroutine.
type Imager struct {
	pupil *Pupil
	plan  *fft.Plan
	h     []complex128
	s     []float64
}

// NewImager returns an Imager for p. It panics if p is nil or transmits nothing.
func NewImager(p *Pupil) *Imager {
	if p == nil || len(p.Index) == 0 || len(p.Amp) != p.N*p.N {
		panic("optics: NewImager needs a non-empty pupil")
	}
	n := p.N
	return &Imager{
		pupil: p,
		plan:  fft.NewPlan(n, n),
		h:     make([]complex128, n*n),
		s:     make([]float64, n*n),
	}
}

// Pupil returns the imager's pupil.
func (im *Imager) Pupil() *Pupil { return im.pupil }

// AmplitudePSF writes the amplitude PSF h = F⁻¹{A·exp(iφ)} into dst (length
// N*N), with F⁻¹ the inverse DFT including 1/N² (numpy ifft2). phase (rad,
// length N*N) is read only where Amp > 0. The PSF centre is pixel 0
// (wrap-around). It panics on wrong lengths.
func (im *Imager) AmplitudePSF(dst []complex128, phase []float64) {
	p := im.pupil
	n2 := p.N * p.N
	if len(dst) != n2 || len(phase) != n2 {
		panic(fmt.Sprintf("optics: AmplitudePSF lengths %d, %d, want %d", len(dst), len(phase), n2))
	}
	for i := range dst {
		dst[i] = 0
	}
	for _, i := range p.Index {
		s, c := math.Sincos(phase[i])
		dst[i] = complex(p.Amp[i]*c, p.Amp[i]*s)
	}
	im.plan.Inverse(dst, dst)
}

// PSF writes the normalised intensity PSF s = |h|²/Σ|h|² into dst (length
// N*N, sums to 1, centred on pixel 0 with wrap-around). It panics on wrong
// lengths. dst may alias phase.
func (im *Imager) PSF(dst []float64, phase []float64) {
	n2 := im.pupil.N * im.pupil.N
	if len(dst) != n2 {
		panic(fmt.Sprintf("optics: PSF dst length %d, want %d", len(dst), n2))
	}
	im.AmplitudePSF(im.h, phase)
	var c float64
	for i, v := range im.h {
		a := real(v)*real(v) + imag(v)*imag(v)
		dst[i] = a
		c += a
	}
	inv := 1 / c
	for i := range dst {
		dst[i] *= inv
	}
}

// OTF writes the optical transfer function S = F{s} into dst (length N*N,
// unshifted: zero frequency at index 0, S(0) = 1 up to rounding), with F the
// unnormalised forward DFT. It is zero beyond the cut-off radius 2·Radius. It
// panics on wrong lengths.
func (im *Imager) OTF(dst []complex128, phase []float64) {
	im.PSF(im.s, phase)
	im.plan.ForwardReal(dst, im.s)
}
