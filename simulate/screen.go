package simulate

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"pdwave/model/fft"
)

// ScreenParams describes a square phase screen.
type ScreenParams struct {
	N            int     // side, pixels (≥ 2; powers of two are fastest)
	Dx           float64 // pixel size, m
	R0           float64 // Fried parameter at the wavelength in use, m (the screen is in radians at that wavelength)
	L0           float64 // outer scale, m; ≤ 0 or +Inf means Kolmogorov (κ0 = 0)
	Subharmonics bool    // add subharmonics for the low orders
	Levels       int     // subharmonic levels when Subharmonics (0 means 3; at most 12)
}

// levels returns the number of subharmonic levels in use (0 without).
func (p ScreenParams) levels() int {
	switch {
	case !p.Subharmonics:
		return 0
	case p.Levels == 0:
		return 3
	}
	return p.Levels
}

// Validate reports whether the parameters describe a screen.
func (p ScreenParams) Validate() error {
	switch {
	case p.N < 2:
		return fmt.Errorf("simulate: screen size %d, need at least 2 pixels", p.N)
	case !(p.Dx > 0) || math.IsInf(p.Dx, 0):
		return fmt.Errorf("simulate: screen pixel size %g m, need a positive finite value", p.Dx)
	case !(p.R0 > 0) || math.IsInf(p.R0, 0):
		return fmt.Errorf("simulate: Fried parameter r0 = %g m, need a positive finite value", p.R0)
	case math.IsNaN(p.L0):
		return errors.New("simulate: outer scale L0 is NaN")
	case p.Levels < 0 || p.Levels > 12:
		return fmt.Errorf("simulate: %d subharmonic levels, want 0 (default 3) to 12", p.Levels)
	}
	return nil
}

// kappa0 returns κ0 = 1/L0 in cycles per metre, 0 for Kolmogorov.
func (p ScreenParams) kappa0() float64 {
	if p.L0 <= 0 || math.IsInf(p.L0, 1) {
		return 0
	}
	return 1 / p.L0
}

// PhasePSD returns the von Kármán phase power spectral density
//
//	Φ(κ) = 0.023 r0^(−5/3) (κ² + κ0²)^(−11/6)   [rad² m²]
//
// at spatial frequency κ (cycles per metre), κ0 = 1/L0 (0 for L0 ≤ 0 or
// +Inf): the Kolmogorov phase spectrum 0.023 r0^(−5/3) κ^(−11/3) in
// cycles per metre (Noll 1976, JOSA 66, 207; Lane, Glindemann & Dainty
// 1992) with the von Kármán modification (κ² → κ² + κ0², κ0 = 1/L0; Roddier 1981,
// Progress in Optics 19, 281, from memory). It returns +Inf
// at κ = κ0 = 0.
func PhasePSD(kappa, r0, l0 float64) float64 {
	k0 := ScreenParams{L0: l0}.kappa0()
	return 0.023 * math.Pow(r0, -5.0/3) * math.Pow(kappa*kappa+k0*k0, -11.0/6)
}

// StructureFunction returns the Kolmogorov phase structure function
// D(r) = 6.88 (r/r0)^(5/3) rad² (Fried 1965), valid for r ≪ L0.
func StructureFunction(r, r0 float64) float64 {
	return 6.88 * math.Pow(r/r0, 5.0/3)
}

// Screen is a periodic phase screen in radians, N×N, row-major.
type Screen struct {
	N    int       // side, pixels
	Dx   float64   // pixel size, m
	Data []float64 // N*N, rad
}

// At returns the screen value at the fractional pixel position (x, y) by
// bilinear interpolation; the screen is periodic, so any finite position is
// valid.
func (s *Screen) At(x, y float64) float64 {
	n := s.N
	fx := math.Floor(x)
	fy := math.Floor(y)
	tx := x - fx
	ty := y - fy
	ix := wrap(int(fx), n)
	iy := wrap(int(fy), n)
	ix1 := ix + 1
	if ix1 == n {
		ix1 = 0
	}
	iy1 := iy + 1
	if iy1 == n {
		iy1 = 0
	}
	r0 := s.Data[iy*n:]
	r1 := s.Data[iy1*n:]
	return (1-ty)*((1-tx)*r0[ix]+tx*r0[ix1]) + ty*((1-tx)*r1[ix]+tx*r1[ix1])
}

// AddWindow adds to dst (n×n, row-major) the screen sampled on a grid of
// pixel spacing 1 whose pixel (0,0) lies at the fractional screen position
// (x0, y0), by bilinear interpolation with periodic wrap-around. dst must
// have length n*n; it panics otherwise. Because the interpolation weights
// are the same for every pixel of the window, a whole window costs four
// multiply-adds per pixel.
func (s *Screen) AddWindow(dst []float64, n int, x0, y0 float64) {
	if len(dst) != n*n {
		panic(fmt.Sprintf("simulate: window buffer length %d, want %d", len(dst), n*n))
	}
	N := s.N
	fx := math.Floor(x0)
	fy := math.Floor(y0)
	tx := x0 - fx
	ty := y0 - fy
	w00 := (1 - tx) * (1 - ty)
	w01 := tx * (1 - ty)
	w10 := (1 - tx) * ty
	w11 := tx * ty
	bx := wrap(int(fx), N)
	by := wrap(int(fy), N)
	for y := 0; y < n; y++ {
		iy := (by + y) % N
		iy1 := iy + 1
		if iy1 == N {
			iy1 = 0
		}
		r0 := s.Data[iy*N : iy*N+N]
		r1 := s.Data[iy1*N : iy1*N+N]
		row := dst[y*n : y*n+n]
		ix := bx
		for x := range row {
			ix1 := ix + 1
			if ix1 == N {
				ix1 = 0
			}
			row[x] += w00*r0[ix] + w01*r0[ix1] + w10*r1[ix] + w11*r1[ix1]
			ix = ix1
		}
	}
}

func wrap(i, n int) int {
	i %= n
	if i < 0 {
		i += n
	}
	return i
}

// ScreenGenerator draws phase screens of one size and statistics. It owns
// an FFT plan and buffers, so it allocates nothing per screen; it is not
// safe for concurrent use.
//
// Method (Lane, Glindemann & Dainty 1992, Waves in Random Media 2, 209):
// complex Gaussian coefficients c_k (real and imaginary parts N(0,1)) are
// weighted by √Φ(κ_k)·Δκ with Δκ = 1/(N·Dx) and transformed; the real and
// imaginary parts of the result are two independent screens with the
// spectrum Φ. The κ = 0 term is zero (screens have no piston). With
// Subharmonics, levels p = 1…Levels of 3×3 frequencies spaced Δκ/3^p
// around the origin (centre excluded), each weighted by √Φ·Δκ/3^p, are
// added directly in the image domain and the screen mean is removed
// (Lane et al. 1992 §4; Johansson & Gavel 1994, Proc. SPIE 2200, 372).
// Cells next to the origin use a cell-averaged Φ (see cellPSD).
//
// How many levels: for L0 = ∞ the power left out below the finest level,
// of radius K ≈ 0.56 Δκ/3^Levels, lowers the structure function at
// separation r by a fraction ≈ 1.24 (rK)^(1/3) (integral of Φ·(2πκr)²/2
// over κ < K, relative to 6.88 (r/r0)^(5/3)); the same holds for tilt over
// a pupil of diameter r. Three levels leave ≈ 20 % of the tilt out for a
// pupil a quarter of the screen; eight leave ≈ 4 %. With a finite L0 the
// spectrum flattens below κ0 and few levels are needed: see LevelsFor.
type ScreenGenerator struct {
	p    ScreenParams
	plan *fft.Plan
	amp  []float64    // √Φ(κ)·Δκ per FFT frequency (0 at κ = 0)
	buf  []complex128 // N*N
	// subharmonics: per level, amplitudes of the 3×3 frequencies and the
	// phasors exp(2πi m Δκ_p x) for m = −1, 0, 1 along one axis.
	subAmp [][9]float64
	subPh  [][3][]complex128 // [level][m+1][pixel]
	rows   [3][]complex128   // scratch, N each
}

// NewScreenGenerator returns a generator for screens with parameters p, or
// an error if p is invalid.
func NewScreenGenerator(p ScreenParams) (*ScreenGenerator, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	n := p.N
	g := &ScreenGenerator{
		p:    p,
		plan: fft.NewPlan(n, n),
		amp:  make([]float64, n*n),
		buf:  make([]complex128, n*n),
	}
	dk := 1 / (float64(n) * p.Dx)
	for ky := 0; ky < n; ky++ {
		fy := float64(signedFreq(ky, n)) * dk
		for kx := 0; kx < n; kx++ {
			if kx == 0 && ky == 0 {
				continue
			}
			fx := float64(signedFreq(kx, n)) * dk
			g.amp[ky*n+kx] = math.Sqrt(cellPSD(fx, fy, dk, p.R0, p.L0)) * dk
		}
	}
	if nl := p.levels(); nl > 0 {
		g.subAmp = make([][9]float64, nl)
		g.subPh = make([][3][]complex128, nl)
		for lev := 0; lev < nl; lev++ {
			dkp := dk / math.Pow(3, float64(lev+1))
			for m := -1; m <= 1; m++ {
				for q := -1; q <= 1; q++ {
					if m == 0 && q == 0 {
						continue
					}
					g.subAmp[lev][(q+1)*3+(m+1)] = math.Sqrt(cellPSD(float64(m)*dkp, float64(q)*dkp, dkp, p.R0, p.L0)) * dkp
				}
				ph := make([]complex128, n)
				for x := range ph {
					// Positions relative to the screen origin in metres.
					s, c := math.Sincos(2 * math.Pi * float64(m) * dkp * float64(x) * p.Dx)
					ph[x] = complex(c, s)
				}
				g.subPh[lev][m+1] = ph
			}
		}
		for i := range g.rows {
			g.rows[i] = make([]complex128, n)
		}
	}
	return g, nil
}

// Params returns the generator's parameters.
func (g *ScreenGenerator) Params() ScreenParams { return g.p }

// signedFreq maps an FFT index to its signed frequency in [−n/2, n/2).
func signedFreq(k, n int) int {
	if k >= (n+1)/2 {
		return k - n
	}
	return k
}

// GeneratePair fills a and b (each N*N) with two independent screens, in
// radians, drawn from rng. a and b must not alias; b may be nil to discard
// the second screen. It panics if a or a non-nil b has the wrong length.
func (g *ScreenGenerator) GeneratePair(a, b []float64, rng *rand.Rand) {
	n := g.p.N
	if len(a) != n*n || (b != nil && len(b) != n*n) {
		panic(fmt.Sprintf("simulate: screen buffers of length %d and %d, want %d", len(a), len(b), n*n))
	}
	for i, w := range g.amp {
		if w == 0 {
			g.buf[i] = 0
			continue
		}
		g.buf[i] = complex(w*rng.NormFloat64(), w*rng.NormFloat64())
	}
	// The sign of the exponent is immaterial for circular Gaussian
	// coefficients; the unnormalised forward transform gives Σ c_k e^{…}.
	g.plan.Forward(g.buf, g.buf)
	if len(g.subAmp) > 0 {
		g.addSubharmonics(rng)
	}
	var ma, mb float64
	for i, v := range g.buf {
		a[i] = real(v)
		ma += real(v)
		mb += imag(v)
		if b != nil {
			b[i] = imag(v)
		}
	}
	if len(g.subAmp) > 0 {
		// Remove the piston the subharmonics add (the FFT part has none).
		ma /= float64(n * n)
		mb /= float64(n * n)
		for i := range a {
			a[i] -= ma
		}
		if b != nil {
			for i := range b {
				b[i] -= mb
			}
		}
	}
}

// Generate fills dst (N*N) with one screen in radians drawn from rng.
func (g *ScreenGenerator) Generate(dst []float64, rng *rand.Rand) {
	g.GeneratePair(dst, nil, rng)
}

// addSubharmonics adds the subharmonic levels to g.buf (both the
// real and imaginary screens), using separability: for each level,
// Σ_{m,q} c_{mq} e_m(x) e_q(y) = Σ_q e_q(y) R_q(x) with R_q = Σ_m c_{mq} e_m.
func (g *ScreenGenerator) addSubharmonics(rng *rand.Rand) {
	n := g.p.N
	for lev := range g.subAmp {
		var c [9]complex128
		for i, w := range g.subAmp[lev] {
			if w == 0 {
				continue
			}
			c[i] = complex(w*rng.NormFloat64(), w*rng.NormFloat64())
		}
		ph := &g.subPh[lev]
		for q := 0; q < 3; q++ {
			r := g.rows[q]
			for x := 0; x < n; x++ {
				r[x] = c[q*3]*ph[0][x] + c[q*3+1]*ph[1][x] + c[q*3+2]*ph[2][x]
			}
		}
		for y := 0; y < n; y++ {
			e0, e1, e2 := ph[0][y], ph[1][y], ph[2][y]
			row := g.buf[y*n : y*n+n]
			r0, r1, r2 := g.rows[0], g.rows[1], g.rows[2]
			for x := range row {
				row[x] += e0*r0[x] + e1*r1[x] + e2*r2[x]
			}
		}
	}
}

// NewScreen draws one screen with parameters p from rng. It is a
// convenience for single screens; use a ScreenGenerator for many.
func NewScreen(rng *rand.Rand, p ScreenParams) (*Screen, error) {
	g, err := NewScreenGenerator(p)
	if err != nil {
		return nil, err
	}
	s := &Screen{N: p.N, Dx: p.Dx, Data: make([]float64, p.N*p.N)}
	g.Generate(s.Data, rng)
	return s, nil
}

// cellPSD returns the PSD value that represents the frequency cell of side
// dk centred on (fx, fy) (cycles per metre). Far from the origin it is
// Φ at the centre. Within two cells of the origin, where Φ varies fast,
// it is the cell average of Φ(κ)·κ² divided by κ_c² (κ_c the cell
// centre), so the cell carries the right share of the phase gradient
// variance, which dominates the structure function at separations small
// against 1/dk (midpoint rule on a 16×16 sub-grid; our choice).
func cellPSD(fx, fy, dk, r0, l0 float64) float64 {
	kc := math.Hypot(fx, fy)
	if kc > 2.9*dk {
		return PhasePSD(kc, r0, l0)
	}
	const m = 16
	var s float64
	for i := 0; i < m; i++ {
		y := fy + dk*((float64(i)+0.5)/m-0.5)
		for j := 0; j < m; j++ {
			x := fx + dk*((float64(j)+0.5)/m-0.5)
			k2 := x*x + y*y
			s += PhasePSD(math.Sqrt(k2), r0, l0) * k2
		}
	}
	return s / (m * m) / (kc * kc)
}

// LevelsFor returns a number of subharmonic levels for screens of side
// n·dx metres and outer scale l0 (m; ≤ 0 or +Inf for Kolmogorov): enough
// that the finest spacing Δκ/3^p falls below κ0/10 = 1/(10 L0), at least 3
// and at most 10 (Kolmogorov gets 10).
func LevelsFor(n int, dx, l0 float64) int {
	k0 := ScreenParams{L0: l0}.kappa0()
	dk := 1 / (float64(n) * dx)
	lev := 3
	for lev < 10 && (k0 == 0 || dk/math.Pow(3, float64(lev)) > k0/10) {
		lev++
	}
	return lev
}
