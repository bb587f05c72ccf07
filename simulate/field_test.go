package simulate

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// TestFieldIsoplanatic: with every layer at the ground the PSF is the same
// over the field, so the blended Field must equal one plain convolution of
// the object with that PSF (the hat weights sum to one and no piece wraps).
// For Oversample 1 (N×N PSF, no pixel box) it is checked against a direct
// (non-FFT) convolution sum to 1e-9 relative; for Oversample 2 (2N×2N PSF
// and the pixel box, applied in Fourier space on each FFT canvas) against
// one FFT convolution of the whole object canvas on a larger canvas, to
// 1e-5 relative (the pixel box's discrete kernel has 1/x² tails, which the
// piece and reference canvases of different sizes wrap differently;
// measured 1.2e-6).
func TestFieldIsoplanatic(t *testing.T) {
	for _, q := range []int{1, 2} {
		c := demoConfig()
		c.Patch = 32
		c.Frames = 2
		c.Camera.Photons = 0
		c.Oversample = q
		c.Turbulence.Layers = []Layer{{Height: 0, Weight: 1, Speed: 7, Direction: 1}}
		s := newSim(t, c)
		const nx, ny = 72, 48
		p := q * c.Patch
		mx, my := nx+p, ny+p
		// A user map exactly the canvas size: the window is the whole map.
		rng := rand.New(rand.NewPCG(10, 10))
		obj := make([]float64, mx*my)
		for i := range obj {
			obj[i] = 0.5 + rng.Float64()
		}
		r, err := s.Field(rand.New(rand.NewPCG(11, 11)), nx, ny, Options{Object: obj, ObjectNx: mx, ObjectNy: my, NodeSpacing: 10})
		if err != nil {
			t.Fatal(err)
		}
		mean := stat.Mean(obj, nil)
		tol := 1e-9
		if q > 1 {
			tol = 1e-5
		}
		for fr, tm := range r.Times {
			want := fieldReference(s, r.Atmosphere, tm, obj, mx, my, nx, ny)
			var maxErr, maxVal float64
			for ch := 0; ch < 2; ch++ {
				for i, w := range want[ch] {
					w /= mean
					maxErr = math.Max(maxErr, math.Abs(r.Burst.Data[ch][fr][i]-w))
					maxVal = math.Max(maxVal, math.Abs(w))
				}
			}
			t.Logf("oversample %d, frame %d: max difference %.2g relative", q, fr, maxErr/maxVal)
			if maxErr > tol*maxVal {
				t.Errorf("oversample %d, frame %d: field differs from the plain convolution by %g (max %g)", q, fr, maxErr, maxVal)
			}
		}
		// Object truth is the central crop, in object units (noiseless).
		if got, want := r.Burst.Object[5*nx+7], obj[(5+p/2)*mx+7+p/2]/mean; math.Abs(got-want) > 1e-12 {
			t.Errorf("oversample %d: object truth %g, want %g", q, got, want)
		}
	}
}

// fieldReference returns both channels' images (nx×ny, field at offset
// p/2 of the mx×my object canvas) of obj through the on-axis PSF at time
// tm: a direct convolution sum for Oversample 1, else one FFT convolution
// (with the pixel box) on a canvas larger than the object canvas plus a PSF.
func fieldReference(s *Simulator, atm *Atmosphere, tm float64, obj []float64, mx, my, nx, ny int) [2][]float64 {
	p := s.ImagingPupil().N
	out := [2][]float64{make([]float64, nx*ny), make([]float64, nx*ny)}
	phase := make([]float64, p*p)
	atm.Phase(phase, tm, 0, 0)
	if s.Oversample() > 1 {
		m := canvasSide(max(mx, my)+p, 2)
		f := s.newFormer(m)
		f.psfs(s, phase)
		canvas := make([]float64, m*m)
		for y := 0; y < my; y++ {
			copy(canvas[y*m:y*m+mx], obj[y*mx:])
		}
		spec := make([]complex128, m*m)
		f.plan.ForwardReal(spec, canvas)
		f.blurPair(spec)
		for y := 0; y < ny; y++ {
			for x := 0; x < nx; x++ {
				v := f.buf[(y+p/2)*m+x+p/2]
				out[0][y*nx+x], out[1][y*nx+x] = real(v), imag(v)
			}
		}
		return out
	}
	f := s.newFormer(64)
	f.psfs(s, phase)
	for ch := 0; ch < 2; ch++ {
		psf := f.psf[ch]
		for y := 0; y < ny; y++ {
			for x := 0; x < nx; x++ {
				var sum float64
				for py := 0; py < p; py++ {
					dy := py
					if py >= p/2 {
						dy -= p
					}
					for px := 0; px < p; px++ {
						dx := px
						if px >= p/2 {
							dx -= p
						}
						sum += psf[py*p+px] * obj[(y+p/2-dy)*mx+x+p/2-dx]
					}
				}
				out[ch][y*nx+x] = sum
			}
		}
	}
	return out
}

// TestFrozenFlowAndAnisoplanatism checks the layer geometry: a pupil at
// field angle ϑ sees a layer at height h shifted by h·ϑ, and the layer moves
// by v·Δt between frames, so the wavefront through a single layer moving
// along +x satisfies φ(t, ϑx) = φ(t + h·Δϑ/v, ϑx + Δϑ) (Taylor frozen flow;
// Taylor 1938). A second layer at the ground would break the identity
// (its shift does not depend on ϑ), which we check too.
func TestFrozenFlowAndAnisoplanatism(t *testing.T) {
	const n = 32
	const h, v = 5000.0, 10.0
	turb := Turbulence{R0: 0.1, L0: 30, Layers: []Layer{{Height: h, Weight: 1, Speed: v}}}
	atm, err := NewAtmosphere(rand.New(rand.NewPCG(12, 12)), turb, n, 0.02, Extent{Duration: 0.1, FieldX: 60e-6}, true)
	if err != nil {
		t.Fatal(err)
	}
	a := make([]float64, n*n)
	b := make([]float64, n*n)
	const dth = 13e-6 // rad: 0.065 m = 3.25 px at 5 km
	atm.Phase(a, 0.01, -20e-6, 0)
	atm.Phase(b, 0.01+h*dth/v, -20e-6+dth, 0)
	var d, s float64
	for i := range a {
		d = math.Max(d, math.Abs(a[i]-b[i]))
		s = math.Max(s, math.Abs(a[i]))
	}
	if d > 1e-9*s {
		t.Errorf("single layer: φ(t, ϑ) and φ(t + hΔϑ/v, ϑ + Δϑ) differ by %g (scale %g)", d, s)
	}
	turb.Layers = append(turb.Layers, Layer{Height: 0, Weight: 1, Speed: 3, Direction: 2})
	atm, err = NewAtmosphere(rand.New(rand.NewPCG(12, 12)), turb, n, 0.02, Extent{Duration: 0.1, FieldX: 60e-6}, true)
	if err != nil {
		t.Fatal(err)
	}
	atm.Phase(a, 0.01, -20e-6, 0)
	atm.Phase(b, 0.01+h*dth/v, -20e-6+dth, 0)
	d = 0
	for i := range a {
		d = math.Max(d, math.Abs(a[i]-b[i]))
	}
	if d < 1e-3 {
		t.Errorf("with a moving ground layer the identity should fail; max difference %g", d)
	}
	// Layer Fried parameters: equal weights give r0_i = r0·2^(3/5).
	if got := LayerR0(0.1, 0.5); math.Abs(got-0.1*math.Pow(2, 0.6)) > 1e-15 {
		t.Errorf("LayerR0(0.1, 0.5) = %g", got)
	}
}

// TestFieldAnisoplanatic: with a high layer the wavefront decorrelates over
// the field: the true coefficients at two field positions are equal at zero
// separation and differ more at 40 px than at 4 px. (For scale: the
// isoplanatic angle θ0 = 0.314 r0/h (Fried 1982, JOSA 72, 52) is 0.8 arcsec
// = 3.4 px here, and the 4-px difference is of order 1 rad as expected.)
func TestFieldAnisoplanatic(t *testing.T) {
	c := demoConfig()
	c.Patch = 32
	c.Frames = 1
	c.Telescope.PixelScale = 0.24 * arcsec
	c.Telescope.Diameter = 0.25
	c.Turbulence.Layers = []Layer{{Height: 8000, Weight: 1}}
	s := newSim(t, c)
	r, err := s.Field(rand.New(rand.NewPCG(13, 13)), 96, 96, Options{})
	if err != nil {
		t.Fatal(err)
	}
	diff := func(dx float64) float64 {
		a := s.TruthAt(r, 20, 48).Coeffs[0]
		b := s.TruthAt(r, 20+dx, 48).Coeffs[0]
		var d float64
		for k := range a {
			d += (a[k] - b[k]) * (a[k] - b[k])
		}
		return math.Sqrt(d)
	}
	d0, d1, d2 := diff(0), diff(4), diff(40)
	if d0 != 0 || !(d1 < d2) || d1 == 0 {
		t.Errorf("coefficient differences at 0, 4, 40 px: %g, %g, %g; want 0 < increasing", d0, d1, d2)
	}
	t.Logf("rms coefficient difference: 4 px %.3f rad, 40 px %.3f rad", d1, d2)
}

// TestFieldDeterministic: the same seed gives the same field for any
// number of workers; another seed gives another.
func TestFieldDeterministic(t *testing.T) {
	c := demoConfig()
	c.Frames = 3
	s := newSim(t, c)
	run := func(seed uint64, w int) []float64 {
		r, err := s.Field(rand.New(rand.NewPCG(seed, 3)), 96, 96, Options{Workers: w})
		if err != nil {
			t.Fatal(err)
		}
		return r.Burst.Data[1][2]
	}
	a, b, d := run(1, 1), run(1, 3), run(2, 2)
	for i := range a {
		if a[i] != b[i] {
			t.Fatalf("pixel %d: %g with 1 worker, %g with 3", i, a[i], b[i])
		}
	}
	same := true
	for i := range a {
		same = same && a[i] == d[i]
	}
	if same {
		t.Error("different seeds: identical fields")
	}
}
