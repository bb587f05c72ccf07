package fft

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"
)

// naiveDFT is the textbook 2-D DFT, O((ny*nx)²), computed with exact
// reduction of the phase index modulo the size to keep rounding small.
func naiveDFT(src []complex128, ny, nx int, sign float64) []complex128 {
	dst := make([]complex128, ny*nx)
	for k := 0; k < ny; k++ {
		for l := 0; l < nx; l++ {
			var s complex128
			for m := 0; m < ny; m++ {
				for n := 0; n < nx; n++ {
					// phase = 2π(km/ny + ln/nx), reduced exactly.
					a := float64((k*m)%ny) / float64(ny)
					b := float64((l*n)%nx) / float64(nx)
					sn, cs := math.Sincos(sign * 2 * math.Pi * (a + b))
					s += src[m*nx+n] * complex(cs, sn)
				}
			}
			dst[k*nx+l] = s
		}
	}
	return dst
}

func randComplex(rng *rand.Rand, n int) []complex128 {
	x := make([]complex128, n)
	for i := range x {
		x[i] = complex(rng.NormFloat64(), rng.NormFloat64())
	}
	return x
}

func randReal(rng *rand.Rand, n int) []float64 {
	x := make([]float64, n)
	for i := range x {
		x[i] = rng.NormFloat64()
	}
	return x
}

// maxRelErr returns max|a-b| / max|b|.
func maxRelErr(a, b []complex128) float64 {
	var d, m float64
	for i := range a {
		d = math.Max(d, cmplx.Abs(a[i]-b[i]))
		m = math.Max(m, cmplx.Abs(b[i]))
	}
	return d / m
}

// tol is the accepted relative error of an FFT of ny×nx points against the
// direct sum: ~1e-12·N (common practice; FFT rounding grows like log N,
// the direct sum like √N, so this is generous for both).
func tol(ny, nx int) float64 { return 1e-12 * float64(max(ny, nx)) }

var sizes2D = [][2]int{
	{1, 1}, {1, 7}, {7, 1}, {2, 2}, {4, 4}, {8, 8}, {6, 10}, {5, 7}, {3, 9},
	{16, 16}, {12, 15}, {32, 8}, {11, 13}, {9, 25}, {20, 18},
}

func TestForwardInverseVsDirect(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, s := range sizes2D {
		ny, nx := s[0], s[1]
		p := NewPlan(ny, nx)
		x := randComplex(rng, ny*nx)
		want := naiveDFT(x, ny, nx, -1)
		got := make([]complex128, ny*nx)
		p.Forward(got, x)
		if e := maxRelErr(got, want); e > tol(ny, nx) {
			t.Errorf("Forward %d×%d: rel err %.3g > %.3g", ny, nx, e, tol(ny, nx))
		}
		wantInv := naiveDFT(x, ny, nx, +1)
		for i := range wantInv {
			wantInv[i] /= complex(float64(ny*nx), 0)
		}
		p.Inverse(got, x)
		if e := maxRelErr(got, wantInv); e > tol(ny, nx) {
			t.Errorf("Inverse %d×%d: rel err %.3g > %.3g", ny, nx, e, tol(ny, nx))
		}
	}
}

// Test1DSizes covers many 1-D lengths (all radices and the Bluestein path),
// including the patch sizes used by the pipeline.
func Test1DSizes(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	var ns []int
	for n := 1; n <= 40; n++ {
		ns = append(ns, n)
	}
	ns = append(ns, 48, 49, 64, 80, 96, 97, 100, 121, 128, 243, 250, 256)
	for _, n := range ns {
		for _, shape := range [][2]int{{1, n}, {n, 1}} {
			ny, nx := shape[0], shape[1]
			p := NewPlan(ny, nx)
			x := randComplex(rng, n)
			want := naiveDFT(x, ny, nx, -1)
			got := make([]complex128, n)
			p.Forward(got, x)
			if e := maxRelErr(got, want); e > tol(ny, nx) {
				t.Errorf("Forward %d×%d: rel err %.3g", ny, nx, e)
			}
		}
	}
}

func TestRealVsDirect(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, s := range sizes2D {
		ny, nx := s[0], s[1]
		p := NewPlan(ny, nx)
		r := randReal(rng, ny*nx)
		x := make([]complex128, ny*nx)
		for i, v := range r {
			x[i] = complex(v, 0)
		}
		want := naiveDFT(x, ny, nx, -1)
		got := make([]complex128, ny*nx)
		p.ForwardReal(got, r)
		if e := maxRelErr(got, want); e > tol(ny, nx) {
			t.Errorf("ForwardReal %d×%d: rel err %.3g", ny, nx, e)
		}
		// Hermitian symmetry: X[k,l] = conj(X[-k,-l]).
		var herm, scale float64
		for k := 0; k < ny; k++ {
			for l := 0; l < nx; l++ {
				a := got[k*nx+l]
				b := got[((ny-k)%ny)*nx+(nx-l)%nx]
				herm = math.Max(herm, cmplx.Abs(a-cmplx.Conj(b)))
				scale = math.Max(scale, cmplx.Abs(a))
			}
		}
		if herm/scale > tol(ny, nx) {
			t.Errorf("ForwardReal %d×%d: Hermitian asymmetry %.3g", ny, nx, herm/scale)
		}
		// InverseReal of a general (non-Hermitian) spectrum = Re(Inverse).
		c := randComplex(rng, ny*nx)
		c0 := append([]complex128(nil), c...)
		wantInv := naiveDFT(c, ny, nx, +1)
		gotR := make([]float64, ny*nx)
		p.InverseReal(gotR, c)
		var d, m float64
		for i := range gotR {
			w := real(wantInv[i]) / float64(ny*nx)
			d = math.Max(d, math.Abs(gotR[i]-w))
			m = math.Max(m, cmplx.Abs(wantInv[i])/float64(ny*nx))
		}
		if d/m > tol(ny, nx) {
			t.Errorf("InverseReal %d×%d: rel err %.3g", ny, nx, d/m)
		}
		for i := range c {
			if c[i] != c0[i] {
				t.Fatalf("InverseReal %d×%d modified src", ny, nx)
			}
		}
	}
}

func TestRoundTripAndAliasing(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for _, s := range [][2]int{{64, 64}, {48, 48}, {80, 80}, {96, 100}, {100, 96}, {128, 128}, {7, 11}, {1, 64}} {
		ny, nx := s[0], s[1]
		p := NewPlan(ny, nx)
		x := randComplex(rng, ny*nx)
		ref := make([]complex128, ny*nx)
		p.Forward(ref, x)
		// In place.
		y := append([]complex128(nil), x...)
		p.Forward(y, y)
		if e := maxRelErr(y, ref); e != 0 {
			t.Errorf("%d×%d: in-place Forward differs from out-of-place by %.3g", ny, nx, e)
		}
		p.Inverse(y, y)
		if e := maxRelErr(y, x); e > 1e-13*math.Log2(float64(ny*nx)+1) {
			t.Errorf("%d×%d: Inverse(Forward(x)) rel err %.3g", ny, nx, e)
		}
		// Parseval: Σ|x|² = Σ|X|²/(ny*nx).
		var ex, eX float64
		for i := range x {
			ex += real(x[i])*real(x[i]) + imag(x[i])*imag(x[i])
			eX += real(ref[i])*real(ref[i]) + imag(ref[i])*imag(ref[i])
		}
		eX /= float64(ny * nx)
		if math.Abs(ex-eX) > 1e-12*ex {
			t.Errorf("%d×%d: Parseval %v vs %v", ny, nx, ex, eX)
		}
		// Real round trip.
		r := randReal(rng, ny*nx)
		spec := make([]complex128, ny*nx)
		p.ForwardReal(spec, r)
		back := make([]float64, ny*nx)
		p.InverseReal(back, spec)
		var d, m float64
		for i := range r {
			d = math.Max(d, math.Abs(back[i]-r[i]))
			m = math.Max(m, math.Abs(r[i]))
		}
		if d/m > 1e-13*math.Log2(float64(ny*nx)+1) {
			t.Errorf("%d×%d: real round trip rel err %.3g", ny, nx, d/m)
		}
	}
}

func TestShift(t *testing.T) {
	// numpy.fft.fftshift(arange(n)) for n=5 is [3 4 0 1 2]; for n=4 [2 3 0 1].
	for _, s := range [][2]int{{4, 5}, {5, 4}, {1, 1}, {3, 3}, {6, 8}} {
		ny, nx := s[0], s[1]
		src := make([]float64, ny*nx)
		csrc := make([]complex128, ny*nx)
		for i := range src {
			src[i] = float64(i)
			csrc[i] = complex(float64(i), -float64(i))
		}
		dst := make([]float64, ny*nx)
		cdst := make([]complex128, ny*nx)
		Shift(dst, src, ny, nx)
		ShiftComplex(cdst, csrc, ny, nx)
		for y := 0; y < ny; y++ {
			for x := 0; x < nx; x++ {
				// Element of the output at (y,x) came from ((y-ny/2) mod ny, (x-nx/2) mod nx).
				sy := ((y-ny/2)%ny + ny) % ny
				sx := ((x-nx/2)%nx + nx) % nx
				if dst[y*nx+x] != src[sy*nx+sx] || cdst[y*nx+x] != csrc[sy*nx+sx] {
					t.Fatalf("%d×%d: shift wrong at (%d,%d)", ny, nx, y, x)
				}
			}
		}
		// Zero frequency lands on (ny/2, nx/2).
		if dst[(ny/2)*nx+nx/2] != 0 {
			t.Errorf("%d×%d: zero frequency not at centre", ny, nx)
		}
	}
	// Explicit 1-D numpy values.
	dst := make([]float64, 5)
	Shift(dst, []float64{0, 1, 2, 3, 4}, 1, 5)
	for i, w := range []float64{3, 4, 0, 1, 2} {
		if dst[i] != w {
			t.Fatalf("Shift 1×5 = %v, want [3 4 0 1 2]", dst)
		}
	}
}

func TestPanics(t *testing.T) {
	mustPanic := func(name string, f func()) {
		t.Helper()
		defer func() {
			if recover() == nil {
				t.Errorf("%s did not panic", name)
			}
		}()
		f()
	}
	mustPanic("NewPlan(0,4)", func() { NewPlan(0, 4) })
	mustPanic("NewPlan(4,-1)", func() { NewPlan(4, -1) })
	p := NewPlan(4, 4)
	mustPanic("Forward short dst", func() { p.Forward(make([]complex128, 15), make([]complex128, 16)) })
	mustPanic("Inverse short src", func() { p.Inverse(make([]complex128, 16), make([]complex128, 3)) })
	mustPanic("ForwardReal", func() { p.ForwardReal(make([]complex128, 16), make([]float64, 17)) })
	mustPanic("InverseReal", func() { p.InverseReal(make([]float64, 1), make([]complex128, 16)) })
	mustPanic("Shift", func() { Shift(make([]float64, 4), make([]float64, 4), 3, 3) })
	mustPanic("Shift negative", func() { Shift(make([]float64, 4), make([]float64, 4), -1, -4) })
	mustPanic("ShiftComplex", func() { ShiftComplex(make([]complex128, 4), make([]complex128, 4), -2, -2) })
}

func TestNoAllocs(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for _, s := range [][2]int{{64, 64}, {7, 11}, {96, 100}} {
		ny, nx := s[0], s[1]
		p := NewPlan(ny, nx)
		x := randComplex(rng, ny*nx)
		y := make([]complex128, ny*nx)
		r := randReal(rng, ny*nx)
		checks := []struct {
			name string
			f    func()
		}{
			{"Forward", func() { p.Forward(y, x) }},
			{"Forward in place", func() { p.Forward(y, y) }},
			{"Inverse", func() { p.Inverse(y, x) }},
			{"ForwardReal", func() { p.ForwardReal(y, r) }},
			{"InverseReal", func() { p.InverseReal(r, x) }},
		}
		for _, c := range checks {
			if n := testing.AllocsPerRun(5, c.f); n != 0 {
				t.Errorf("%d×%d %s: %v allocations per call, want 0", ny, nx, c.name, n)
			}
		}
	}
}

// TestPortablePath repeats the checks with the vector kernels switched off
// (where they exist), so both code paths are compared with the direct DFT.
func TestPortablePath(t *testing.T) {
	if !useVec {
		t.Log("vector kernels not in use on this machine; portable path already tested")
		return
	}
	useVec = false
	defer func() { useVec = true }()
	TestForwardInverseVsDirect(t)
	Test1DSizes(t)
	TestRealVsDirect(t)
	TestRoundTripAndAliasing(t)
}

// separableDFT is the direct DFT computed as 1-D direct sums along x then
// y, O(ny·nx·(ny+nx)): the same exact sum as naiveDFT, cheap enough for
// pipeline-sized grids.
func separableDFT(src []complex128, ny, nx int, sign float64) []complex128 {
	wx := make([]complex128, nx)
	for i := range wx {
		s, c := math.Sincos(sign * 2 * math.Pi * float64(i) / float64(nx))
		wx[i] = complex(c, s)
	}
	wy := make([]complex128, ny)
	for i := range wy {
		s, c := math.Sincos(sign * 2 * math.Pi * float64(i) / float64(ny))
		wy[i] = complex(c, s)
	}
	tmp := make([]complex128, ny*nx)
	for y := 0; y < ny; y++ {
		for l := 0; l < nx; l++ {
			var s complex128
			for n := 0; n < nx; n++ {
				s += src[y*nx+n] * wx[(l*n)%nx]
			}
			tmp[y*nx+l] = s
		}
	}
	dst := make([]complex128, ny*nx)
	for k := 0; k < ny; k++ {
		for l := 0; l < nx; l++ {
			var s complex128
			for m := 0; m < ny; m++ {
				s += tmp[m*nx+l] * wy[(k*m)%ny]
			}
			dst[k*nx+l] = s
		}
	}
	return dst
}

// TestPipelineSizes checks the patch and pupil sizes used by the pipeline
// (and sizes with a Bluestein factor) against the direct DFT, on every
// code path in use (vector kernels and portable).
func TestPipelineSizes(t *testing.T) {
	sizes := [][2]int{{64, 64}, {128, 128}, {96, 96}, {100, 100}, {48, 80}, {97, 64}, {256, 32}}
	if testing.Short() {
		sizes = sizes[:3]
	}
	rng := rand.New(rand.NewPCG(13, 14))
	paths := []bool{false}
	if useVec {
		paths = append(paths, true)
	}
	defer func(v bool) { useVec = v }(useVec)
	for _, s := range sizes {
		ny, nx := s[0], s[1]
		x := randComplex(rng, ny*nx)
		want := separableDFT(x, ny, nx, -1)
		r := randReal(rng, ny*nx)
		rc := make([]complex128, ny*nx)
		for i, v := range r {
			rc[i] = complex(v, 0)
		}
		wantR := separableDFT(rc, ny, nx, -1)
		for _, vec := range paths {
			useVec = vec
			p := NewPlan(ny, nx)
			got := make([]complex128, ny*nx)
			p.Forward(got, x)
			e := maxRelErr(got, want)
			t.Logf("%d×%d vector=%v: Forward rel err %.2g", ny, nx, vec, e)
			if e > tol(ny, nx) {
				t.Errorf("%d×%d vector=%v: Forward rel err %.3g > %.3g", ny, nx, vec, e, tol(ny, nx))
			}
			p.ForwardReal(got, r)
			if e := maxRelErr(got, wantR); e > tol(ny, nx) {
				t.Errorf("%d×%d vector=%v: ForwardReal rel err %.3g", ny, nx, vec, e)
			}
			p.Inverse(got, want)
			if e := maxRelErr(got, x); e > tol(ny, nx) {
				t.Errorf("%d×%d vector=%v: Inverse rel err %.3g", ny, nx, vec, e)
			}
			back := make([]float64, ny*nx)
			p.InverseReal(back, wantR)
			var d, m float64
			for i := range r {
				d = math.Max(d, math.Abs(back[i]-r[i]))
				m = math.Max(m, math.Abs(r[i]))
			}
			if d/m > tol(ny, nx) {
				t.Errorf("%d×%d vector=%v: InverseReal rel err %.3g", ny, nx, vec, d/m)
			}
		}
	}
}
