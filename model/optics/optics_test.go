package optics

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"strings"
	"testing"

	"pdwave/model/modes"
)

// telescopeFor returns a telescope whose pupil on an n×n grid has the given
// radius in pixels (D = 1 m, λ = 1 µm, p = 2λR/(D n)).
func telescopeFor(n int, radius, obsc float64) Telescope {
	return Telescope{Diameter: 1, Obscuration: obsc, Wavelength: 1e-6, PixelScale: 2e-6 * radius / float64(n), FocalRatio: 10}
}

// demo is the invented demo telescope of the shared decisions (contract):
// D = 0.5 m, obscuration 0.15, F# 40, λ = 600 nm, p = 0.120 arcsec.
var demo = Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40, Wavelength: 600e-9, PixelScale: 0.120 / RadToArcsec}

func TestValidate(t *testing.T) {
	if err := demo.Validate(); err != nil {
		t.Fatal(err)
	}
	bad := []func(*Telescope){
		func(t *Telescope) { t.Diameter = 0 },
		func(t *Telescope) { t.Diameter = math.NaN() },
		func(t *Telescope) { t.Wavelength = -1 },
		func(t *Telescope) { t.PixelScale = math.Inf(1) },
		func(t *Telescope) { t.Obscuration = 1 },
		func(t *Telescope) { t.Obscuration = -0.1 },
		func(t *Telescope) { t.Spiders = -1 },
		func(t *Telescope) { t.Spiders = 4; t.SpiderWidth = 0 },
		func(t *Telescope) { t.Spiders = 4; t.SpiderWidth = 0.6 },
		func(t *Telescope) { t.FocalRatio = -2 },
	}
	for i, f := range bad {
		tt := demo
		f(&tt)
		if tt.Validate() == nil {
			t.Errorf("case %d: invalid telescope %+v accepted", i, tt)
		}
	}
}

// Nyquist sampling p ≤ λ/(2D) ⇔ r_c = D N p/λ ≤ N/2 (Shannon sampling of
// the incoherent cut-off D/λ; Goodman, Introduction to Fourier Optics).
func TestCheckSampling(t *testing.T) {
	// Demo: λ/(2D) = 600e-9/1.0 rad = 0.1238 arcsec > 0.120 arcsec (contract).
	if err := demo.CheckSampling(64); err != nil {
		t.Errorf("demo telescope rejected: %v", err)
	}
	if rc := demo.CutoffRadius(64); math.Abs(rc-64*0.120/0.24753) > 0.01 {
		t.Errorf("demo cut-off radius %g px, want 64·0.120/0.2475 = 31.03 (λ/D = 0.2475 arcsec)", rc)
	}
	ny := demo.Nyquist()
	for _, f := range []float64{0.5, 0.99, 1} {
		tt := demo
		tt.PixelScale = f * ny
		if err := tt.CheckSampling(64); err != nil {
			t.Errorf("p = %g·λ/(2D) rejected: %v", f, err)
		}
		if rc := tt.CutoffRadius(64); rc > 32*(1+1e-12) {
			t.Errorf("p = %g·λ/(2D): r_c = %g > N/2", f, rc)
		}
	}
	for _, f := range []float64{1.001, 1.1, 3} {
		tt := demo
		tt.PixelScale = f * ny
		err := tt.CheckSampling(64)
		if err == nil {
			t.Fatalf("p = %g·λ/(2D) accepted", f)
		}
		if !strings.Contains(err.Error(), "under-sampled") || !strings.Contains(err.Error(), "0.1238 arcsec") {
			t.Errorf("unclear message: %v", err)
		}
		if _, err := NewPupil(tt, 64); err == nil {
			t.Error("NewPupil accepted under-sampled data")
		}
	}
	if demo.CheckSampling(0) == nil {
		t.Error("n = 0 accepted")
	}
}

// Z4 = √3(2ρ²−1) (Noll 1976 Table I) spans 2√3 from ρ = 0 to ρ = 1, so a
// coefficient a has peak-to-valley 2√3·a (from the polynomial itself).
func TestDefocusPV(t *testing.T) {
	a := DefocusCoefficient(1)
	if pv := a * (modes.Zernike(4, 1, 0) - modes.Zernike(4, 0, 0)); math.Abs(pv-2*math.Pi) > 1e-12 {
		t.Errorf("Z4 PV of DefocusCoefficient(1) = %g rad, want 2π", pv)
	}
	if math.Abs(a-math.Pi/math.Sqrt(3)) > 1e-15 {
		t.Errorf("DefocusCoefficient(1) = %g, want π/√3", a)
	}
	// On a grid whose radius is an integer, pixel (N/2+R, N/2) sits at ρ = 1
	// exactly and the centre at ρ = 0: the map's PV is exactly the request.
	p, err := NewPupil(telescopeFor(128, 30, 0), 128)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(p.Radius-30) > 1e-12 {
		t.Fatalf("radius %g, want 30", p.Radius)
	}
	d := make([]float64, 128*128)
	for _, pv := range []float64{0.5, 1, 2.5, -1} {
		p.Defocus(d, pv)
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, i := range p.Index {
			lo, hi = math.Min(lo, d[i]), math.Max(hi, d[i])
		}
		got := (hi - lo) / (2 * math.Pi)
		if math.Abs(got-math.Abs(pv)) > 1e-9 {
			t.Errorf("Defocus(%g): PV %g waves", pv, got)
		}
	}
	for i, v := range d {
		if p.Amp[i] == 0 && v != 0 {
			t.Fatal("Defocus non-zero outside the pupil")
		}
	}
}

// A focus shift dz changes the wavefront by W = dz·NA²/2 at the pupil edge
// (paraxial defocus term, e.g. Mahajan, Optical Imaging and Aberrations), with
// NA = 1/(2F#): W = dz/(8F#²).
func TestFocusShiftPV(t *testing.T) {
	for _, c := range []struct{ dz, lam, f float64 }{{1e-3, 600e-9, 40}, {-2e-4, 500e-9, 12}, {5e-3, 1.5e-6, 80}} {
		na := 1 / (2 * c.f)
		want := c.dz * na * na / 2 / c.lam
		if got := FocusShiftPV(c.dz, c.lam, c.f); math.Abs(got-want) > 1e-12*math.Abs(want) {
			t.Errorf("FocusShiftPV(%g, %g, %g) = %g, want %g", c.dz, c.lam, c.f, got, want)
		}
	}
	// Demo (from memory, common practice): 1 wave PV at F# 40, 600 nm needs 7.68 mm.
	if got := FocusShiftPV(7.68e-3, 600e-9, 40); math.Abs(got-1) > 1e-3 {
		t.Errorf("7.68 mm at F#40, 600 nm: %g waves, want 1", got)
	}
}

func TestPupilGeometry(t *testing.T) {
	// Hard edge agrees with the basis support pixel for pixel.
	tel := telescopeFor(64, 15.5, 0)
	p, err := NewPupil(tel, 64)
	if err != nil {
		t.Fatal(err)
	}
	b, err := modes.New(modes.KindZernike, 3, 64, p.Radius)
	if err != nil {
		t.Fatal(err)
	}
	if len(b.Index) != len(p.Index) {
		t.Fatalf("pupil has %d pixels, basis support %d", len(p.Index), len(b.Index))
	}
	for k := range b.Index {
		if b.Index[k] != p.Index[k] || p.Amp[p.Index[k]] != 1 {
			t.Fatal("pupil and basis support differ")
		}
	}
	// Anti-aliased areas: annulus π R²(1−ε²) within 0.2 %; spiders remove
	// about S·w·R(1−ε) more (geometry).
	const R, eps = 50.0, 0.3
	ta := telescopeFor(256, R, eps)
	pa, err := NewPupilSubsampled(ta, 256, 8)
	if err != nil {
		t.Fatal(err)
	}
	var area float64
	for _, i := range pa.Index {
		area += pa.Amp[i]
	}
	want := math.Pi * R * R * (1 - eps*eps)
	if math.Abs(area/want-1) > 2e-3 {
		t.Errorf("annulus area %g px², want %g", area, want)
	}
	ts := ta
	ts.Spiders, ts.SpiderWidth = 4, 0.02 // 2 px wide at R = 50 px
	ps, err := NewPupilSubsampled(ts, 256, 8)
	if err != nil {
		t.Fatal(err)
	}
	var areaS float64
	for _, i := range ps.Index {
		areaS += ps.Amp[i]
	}
	wantS := want - 4*2*R*(1-eps)
	if math.Abs(areaS/wantS-1) > 3e-3 {
		t.Errorf("area with 4 vanes %g px², want ≈ %g", areaS, wantS)
	}
	// The vane at angle 0 blocks the +x axis, not the −x axis (3 vanes: 0°, 120°, 240°).
	t3 := ta
	t3.Spiders, t3.SpiderWidth = 3, 0.02
	p3, _ := NewPupil(t3, 256)
	if p3.Amp[128*256+128+40] != 0 || p3.Amp[128*256+128-40] != 1 {
		t.Error("spider vane orientation wrong")
	}
	if _, err := NewPupilSubsampled(ta, 256, 0); err == nil {
		t.Error("sub = 0 accepted")
	}
	if _, err := NewPupil(telescopeFor(64, 0.4, 0), 64); err == nil {
		t.Error("sub-pixel pupil accepted")
	}
}

// PSF sums to 1, peaks at pixel 0 for a flat wavefront; OTF has S(0) = 1 and
// Hermitian symmetry (real PSF), and equals the normalised autocorrelation of
// the pupil field computed directly (Goodman, Introduction to Fourier
// Optics: the incoherent OTF is the normalised autocorrelation of the pupil
// function).
func TestImageFormationBasics(t *testing.T) {
	const n = 16
	tel := telescopeFor(n, 3.7, 0.2)
	p, err := NewPupil(tel, n)
	if err != nil {
		t.Fatal(err)
	}
	im := NewImager(p)
	rng := rand.New(rand.NewPCG(7, 8))
	phase := make([]float64, n*n)
	s := make([]float64, n*n)
	im.PSF(s, phase)
	var sum float64
	for i, v := range s {
		sum += v
		if v > s[0] {
			t.Fatalf("flat-wavefront PSF peaks at %d, not 0", i)
		}
	}
	if math.Abs(sum-1) > 1e-12 {
		t.Errorf("PSF sum %g", sum)
	}
	for i := range phase {
		phase[i] = rng.NormFloat64()
	}
	otf := make([]complex128, n*n)
	im.OTF(otf, phase)
	if cmplx.Abs(otf[0]-1) > 1e-12 {
		t.Errorf("S(0) = %v, want 1", otf[0])
	}
	// Direct autocorrelation: S(u) = Σ_x P(x+u) P*(x) / Σ|P|², with the
	// forward-DFT sign: S = F{|F⁻¹P|²} gives S(u) = Σ_x P(x) P*(x−u)/ (N² Σ|h|²).
	pf := make([]complex128, n*n)
	for _, i := range p.Index {
		pf[i] = complex(p.Amp[i], 0) * cmplx.Exp(complex(0, phase[i]))
	}
	var norm float64
	for _, v := range pf {
		norm += real(v * cmplx.Conj(v))
	}
	for uy := 0; uy < n; uy++ {
		for ux := 0; ux < n; ux++ {
			var acc complex128
			for y := 0; y < n; y++ {
				for x := 0; x < n; x++ {
					y2, x2 := (y-uy+n)%n, (x-ux+n)%n
					acc += pf[y*n+x] * cmplx.Conj(pf[y2*n+x2])
				}
			}
			acc /= complex(norm, 0)
			got := otf[uy*n+ux]
			if cmplx.Abs(got-acc) > 1e-12 {
				t.Fatalf("OTF(%d,%d) = %v, autocorrelation %v", ux, uy, got, acc)
			}
			// Hermitian: S(−u) = S(u)*.
			if cmplx.Abs(otf[((n-uy)%n)*n+(n-ux)%n]-cmplx.Conj(got)) > 1e-12 {
				t.Fatal("OTF not Hermitian")
			}
		}
	}
}

// Clear circular aperture: MTF(ν) = (2/π)(acos ν − ν√(1−ν²)) (Goodman,
// Introduction to Fourier Optics). N = 256, R = 60 px (cut-off 120 px),
// hard-edge pupil; measured along x, y and the diagonal. Tolerance 3e-3
// absolute (the pixel staircase edge; measured 1.2e-3).
func TestClearApertureMTF(t *testing.T) {
	const n, R = 256, 60.0
	p, err := NewPupil(telescopeFor(n, R, 0), n)
	if err != nil {
		t.Fatal(err)
	}
	im := NewImager(p)
	otf := make([]complex128, n*n)
	im.OTF(otf, make([]float64, n*n))
	worst := 0.0
	for f := 0; f < n/2; f++ {
		for _, dir := range [][2]int{{1, 0}, {0, 1}, {1, 1}} {
			x, y := f*dir[0], f*dir[1]
			if x >= n/2 || y >= n/2 {
				continue
			}
			nu := math.Hypot(float64(x), float64(y)) / (2 * R)
			got := otf[y*n+x]
			want := DiffractionMTF(nu)
			worst = math.Max(worst, math.Abs(real(got)-want))
			if math.Abs(imag(got)) > 1e-12 {
				t.Fatalf("symmetric pupil gives complex OTF %v", got)
			}
		}
	}
	if worst > 3e-3 {
		t.Errorf("MTF error %g, want ≤ 3e-3", worst)
	}
	t.Logf("clear-aperture MTF: max |error| %.2g (N=%d, R=%g px, hard edge)", worst, n, R)
}

// Airy pattern (Born & Wolf, Principles of Optics, §8.5.2 from memory): first zero at
// 1.2197 λ/D (3.8317/π), 83.8 % of the energy inside it. N = 1024, R = 32 px,
// so λ/D = N/(2R) = 16 px; hard-edge pupil (a grey edge removes the
// far-wing energy beyond the pupil's pixel band and raises the core energy
// by 1 %). Tolerances 1 % on the radius, 1 % on the energy.
func TestAiry(t *testing.T) {
	n, R := 1024, 32.0
	if testing.Short() {
		n, R = 512, 16.0
	}
	p, err := NewPupil(telescopeFor(n, R, 0), n)
	if err != nil {
		t.Fatal(err)
	}
	im := NewImager(p)
	h := make([]complex128, n*n)
	im.AmplitudePSF(h, make([]float64, n*n))
	lamD := float64(n) / (2 * R)
	// The pupil is centred on pixel N/2, so h = (−1)^(x+y)·(real Airy amplitude).
	amp := func(x int) float64 {
		v := real(h[x])
		if x%2 == 1 {
			v = -v
		}
		return v
	}
	zero := math.NaN()
	for x := 1; x < n/2; x++ {
		a0, a1 := amp(x-1), amp(x)
		if a0 > 0 && a1 <= 0 {
			zero = float64(x-1) + a0/(a0-a1)
			break
		}
	}
	wantZero := 3.8317 / math.Pi * lamD
	if math.Abs(zero/wantZero-1) > 0.01 {
		t.Errorf("first zero at %.3f px, want 1.2197 λ/D = %.3f px", zero, wantZero)
	}
	s := make([]float64, n*n)
	im.PSF(s, make([]float64, n*n))
	var ee float64
	for y := 0; y < n; y++ {
		dy := float64(min(y, n-y))
		for x := 0; x < n; x++ {
			dx := float64(min(x, n-x))
			if math.Hypot(dx, dy) <= wantZero {
				ee += s[y*n+x]
			}
		}
	}
	if math.Abs(ee/0.838-1) > 0.01 {
		t.Errorf("encircled energy in the first dark ring %.4f, want 0.838", ee)
	}
	t.Logf("Airy: first zero %.4f λ/D (1.2197), energy inside %.4f (0.838)", zero/lamD, ee)
}

// Maréchal approximation: Strehl ≈ exp(−σ²) for small rms phase σ (rad).
// Random Zernike aberrations j = 2..21 scaled to σ = 0.1, 0.2, 0.3 rad over
// the pupil; Strehl = PSF(0)/PSF₀(0). Tolerance 1 % relative: the next term
// is O(σ⁴) ≈ 0.4 % at σ = 0.3 (Mahajan 1983, JOSA 73, 860; from memory).
func TestMarechal(t *testing.T) {
	const n = 128
	p, err := NewPupil(telescopeFor(n, 30, 0.15), n)
	if err != nil {
		t.Fatal(err)
	}
	b, err := modes.New(modes.KindZernike, 20, n, p.Radius)
	if err != nil {
		t.Fatal(err)
	}
	im := NewImager(p)
	s := make([]float64, n*n)
	phase := make([]float64, n*n)
	im.PSF(s, phase)
	s0 := s[0]
	rng := rand.New(rand.NewPCG(11, 12))
	coef := make([]float64, 20)
	worst := 0.0
	for trial := 0; trial < 5; trial++ {
		for _, sigma := range []float64{0.1, 0.2, 0.3} {
			for i := range coef {
				coef[i] = rng.NormFloat64()
			}
			b.Phase(phase, coef)
			// rms over the (obscured) pupil with piston removed.
			var m, m2, w float64
			for _, i := range p.Index {
				m += p.Amp[i] * phase[i]
				w += p.Amp[i]
			}
			m /= w
			for _, i := range p.Index {
				m2 += p.Amp[i] * (phase[i] - m) * (phase[i] - m)
			}
			scale := sigma / math.Sqrt(m2/w)
			for i := range phase {
				phase[i] *= scale
			}
			im.PSF(s, phase)
			strehl := s[0] / s0
			want := math.Exp(-sigma * sigma)
			worst = math.Max(worst, math.Abs(strehl/want-1))
			if math.Abs(strehl/want-1) > 0.01 {
				t.Errorf("σ = %g rad: Strehl %.4f, Maréchal exp(−σ²) = %.4f", sigma, strehl, want)
			}
		}
	}
	t.Logf("Maréchal: worst relative deviation %.2g over 15 aberrations, σ ≤ 0.3 rad", worst)
}

func TestDiffractionMTF(t *testing.T) {
	// Values of the formula (Goodman): 1 at 0, 0 at and beyond 1, and
	// MTF(0.5) = (2/π)(π/3 − 0.5·√0.75) = 0.3910.
	if DiffractionMTF(0) != 1 || DiffractionMTF(1) != 0 || DiffractionMTF(1.5) != 0 {
		t.Error("MTF end points wrong")
	}
	if v := DiffractionMTF(0.5); math.Abs(v-0.39100) > 1e-5 {
		t.Errorf("MTF(0.5) = %g, want 0.39100", v)
	}
	if DiffractionMTF(-0.5) != DiffractionMTF(0.5) {
		t.Error("MTF not even")
	}
}

func TestImagerNoAllocs(t *testing.T) {
	p, err := NewPupil(demo, 64)
	if err != nil {
		t.Fatal(err)
	}
	im := NewImager(p)
	phase := make([]float64, 64*64)
	p.Defocus(phase, 1)
	h := make([]complex128, 64*64)
	s := make([]float64, 64*64)
	if a := testing.AllocsPerRun(20, func() {
		im.AmplitudePSF(h, phase)
		im.PSF(s, phase)
		im.OTF(h, phase)
	}); a != 0 {
		t.Errorf("%v allocations per AmplitudePSF+PSF+OTF, want 0", a)
	}
}

func BenchmarkOTF64(b *testing.B) {
	p, err := NewPupil(demo, 64)
	if err != nil {
		b.Fatal(err)
	}
	im := NewImager(p)
	phase := make([]float64, 64*64)
	p.Defocus(phase, 1)
	otf := make([]complex128, 64*64)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		im.OTF(otf, phase)
	}
}
