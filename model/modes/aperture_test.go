package modes

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/mat"
)

func TestNewForErrors(t *testing.T) {
	bad := []Aperture{
		{Obscuration: -0.1}, {Obscuration: 0.9}, {Obscuration: math.NaN()}, {Obscuration: math.Inf(1)},
		{OuterScale: -1}, {OuterScale: math.NaN()}, {OuterScale: math.Inf(-1)}, {OuterScale: 0.2},
	}
	for _, ap := range bad {
		if _, err := NewFor(KindKL, 10, 32, 12, ap); err == nil {
			t.Errorf("NewFor accepted aperture %+v", ap)
		}
	}
	if _, err := NewFor(KindKL, 0, 32, 12, Aperture{Obscuration: 0.2}); err == nil {
		t.Error("NewFor accepted 0 modes")
	}
	if _, err := NewFor(KindZernike, 10, 32, 17, Aperture{Obscuration: 0.2}); err == nil {
		t.Error("NewFor accepted a pupil larger than the grid")
	}
	if _, err := NewFor("pyramid", 10, 32, 12, Aperture{Obscuration: 0.2}); err == nil {
		t.Error("NewFor accepted an unknown kind")
	}
	_, err := NewFor(KindKL, MaxApertureModes+1, 32, 12, Aperture{OuterScale: 20})
	if err == nil || !strings.Contains(err.Error(), "limit") {
		t.Errorf("NewFor with %d modes: err = %v, want the mode limit", MaxApertureModes+1, err)
	}
	// The clear Kolmogorov shortcut has no such limit (as New).
	if _, err := NewFor(KindZernike, MaxApertureModes+1, 8, 4, Aperture{}); err != nil {
		t.Error(err)
	}
}

// The zero Aperture (and L0 = +Inf) gives New's basis bit for bit, so that
// bases recorded with shipped network weights are reproduced.
func TestNewForClearIsNew(t *testing.T) {
	for _, kind := range []Kind{KindZernike, KindKL} {
		want, _ := New(kind, 36, 64, 15.5)
		for _, ap := range []Aperture{{}, {OuterScale: math.Inf(1)}} {
			got, err := NewFor(kind, 36, 64, 15.5, ap)
			if err != nil {
				t.Fatal(err)
			}
			if !mat.Equal(got.ToNoll, want.ToNoll) || !equalFloats(got.Variance, want.Variance) {
				t.Fatalf("%s %+v: ToNoll or Variance differ from New", kind, ap)
			}
			for k := range want.Modes {
				if !equalFloats(got.Modes[k], want.Modes[k]) {
					t.Fatalf("%s %+v: mode %d differs from New", kind, ap, k)
				}
			}
			if got.Describe() != string(kind)+" 36 modes, obscuration 0, Kolmogorov (Noll 1976 eq. 25)" {
				t.Errorf("Describe() = %q", got.Describe())
			}
		}
	}
}

func equalFloats(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func TestDescribe(t *testing.T) {
	b, err := NewFor(KindKL, 36, 64, 15.5, Aperture{Obscuration: 0.15, OuterScale: 60})
	if err != nil {
		t.Fatal(err)
	}
	if s := b.Describe(); s != "kl 36 modes, obscuration 0.15, L0/D 60" {
		t.Errorf("Describe() = %q", s)
	}
	if a := b.Aperture(); a.Obscuration != 0.15 || a.OuterScale != 60 {
		t.Errorf("Aperture() = %+v", a)
	}
	z, _ := NewFor(KindZernike, 10, 32, 12, Aperture{Obscuration: 0.3})
	if s := z.Describe(); s != "zernike 10 modes, obscuration 0.3, Kolmogorov" || !math.IsInf(z.OuterScale, 1) {
		t.Errorf("Describe() = %q, OuterScale %g", s, z.OuterScale)
	}
}

// The quadrature at the sizes quadSizes picks agrees with a quadrature of
// twice the radial and angular resolution (common practice: a convergence
// check), for an obscured pupil, down to the shortest accepted outer scale.
func TestQuadratureConverged(t *testing.T) {
	count := 65
	if testing.Short() {
		count = 35
	}
	nr, nphi := quadSizesFor(count)
	for _, l0 := range []float64{math.Inf(1), 4, MinOuterScale} {
		sf := structureFor(l0)
		a := quadCov(count, 0.3, sf, nr, nphi)
		b := quadCov(count, 0.3, sf, 2*nr, 2*nphi)
		worst := 0.0
		for i := 0; i < count; i++ {
			for j := 0; j <= i; j++ {
				scale := math.Sqrt(b.c.At(i, i) * b.c.At(j, j))
				worst = math.Max(worst, math.Abs(a.c.At(i, j)-b.c.At(i, j))/scale)
				if d := math.Abs(a.g.At(i, j) - b.g.At(i, j)); d > 1e-12 {
					t.Fatalf("Gram (%d,%d) changes by %g with resolution (should be exact)", i, j, d)
				}
			}
		}
		if worst > 2e-4 {
			t.Errorf("L0/D %g: covariance changes by %.3g (relative to the diagonal) on doubling the quadrature", l0, worst)
		}
		t.Logf("%d modes, L0/D %g, nr %d, nphi %d: covariance within %.2g of the doubled quadrature", count, l0, nr, nphi, worst)
	}
}

// The interpolated von Kármán structure function used by the quadrature
// matches PhaseStructure (D = 1 m, r0 = 1 m) to 1e-9 relative.
func TestVKTable(t *testing.T) {
	for _, l0 := range []float64{MinOuterScale, 1, 30, 1e4} {
		sf := structureFor(l0)
		worst := 0.0
		for i := 1; i <= 5000; i++ {
			d := 2 * math.Pow(float64(i)/5000, 2)
			worst = math.Max(worst, math.Abs(sf(d)/PhaseStructure(d/2, 1, l0)-1))
		}
		if worst > 1e-9 {
			t.Errorf("L0/D %g: table error %.3g", l0, worst)
		}
	}
	if d := structureFor(30)(0); d != 0 {
		t.Errorf("D(0) = %g", d)
	}
}

// (a) A clear aperture with L0 = ∞ by quadrature reproduces today's basis:
// eq. 25 is exact for Kolmogorov turbulence up to its constant, so every
// eigenvalue is the same fraction of New's (measured 0.9890: 2.2698 against
// the 2.2448 implied by 6.88), and the eigenvectors coincide. The tilt
// variance is compared with Noll 1976 Table IV, (Δ1 − Δ3)/2 =
// (1.0299 − 0.134)/2 = 0.448.
func TestQuadratureClearMatchesNoll(t *testing.T) {
	const count = 35
	want, _ := New(KindKL, count, 64, 15.5)
	got, err := newQuadrature(KindKL, count, 64, 15.5, Aperture{})
	if err != nil {
		t.Fatal(err)
	}
	r0 := got.Variance[0] / want.Variance[0]
	for k := range got.Variance {
		r := got.Variance[k] / want.Variance[k]
		if r < 0.97 || r > 1.0 || math.Abs(r-r0) > 2e-4 {
			t.Errorf("mode %d: quadrature %.6g, eq. 25 %.6g, ratio %.5f (mode 0: %.5f)", k, got.Variance[k], want.Variance[k], r, r0)
		}
	}
	t.Logf("quadrature/eq. 25 eigenvalue ratio %.5f", r0)
	if m := minSubspaceCos(want, got); m < 0.99 {
		t.Errorf("smallest principal-angle cosine between the bases %.6f, want > 0.99", m)
	} else {
		t.Logf("smallest principal-angle cosine %.8f", m)
	}
	z, err := newQuadrature(KindZernike, count, 64, 15.5, Aperture{})
	if err != nil {
		t.Fatal(err)
	}
	const tiltNoll = (1.0299 - 0.134) / 2 // Noll 1976 Table IV
	for k := 0; k < 2; k++ {
		if rel := z.Variance[k]/tiltNoll - 1; math.Abs(rel) > 0.005 {
			t.Errorf("Zernike tilt variance %.5f, Noll 1976 Table IV %.5f (rel %.2g)", z.Variance[k], tiltNoll, rel)
		}
	}
	t.Logf("tilt: quadrature %.5f (KL %.5f), Table IV 0.448, eq. 25 %.5f", z.Variance[0], got.Variance[0], NollCovariance(2, 2))
}

// minSubspaceCos returns the smallest cosine of the principal angles between
// the modes of a and b, grouped by equal variance in a (degenerate cos/sin
// pairs), measured in the Zernike coefficients (orthonormal for a clear pupil).
func minSubspaceCos(a, b *Basis) float64 {
	worst := 1.0
	for k := 0; k < a.Count; {
		e := k + 1
		for e < a.Count && math.Abs(a.Variance[e]/a.Variance[k]-1) < 1e-9 {
			e++
		}
		var m mat.Dense
		m.Mul(a.ToNoll.Slice(0, a.Count, k, e).T(), b.ToNoll.Slice(0, b.Count, k, e))
		var svd mat.SVD
		if !svd.Factorize(&m, mat.SVDNone) {
			return 0
		}
		s := svd.Values(nil)
		worst = math.Min(worst, s[len(s)-1])
		k = e
	}
	return worst
}

// (b) The variance in the first J−1 modes (Noll j = 2..J) plus Noll's
// residual Δ_J gives the total piston-removed variance Δ1, for the clear
// aperture: Table IV of Noll 1976 within 3 %, and the quadrature's own total
// ½⟨⟨D⟩⟩ within 1 % of Δ1 = 1.0299.
func TestQuadratureResidualTableIV(t *testing.T) {
	table := []struct {
		J     int
		delta float64
	}{{2, 0.582}, {3, 0.134}, {4, 0.111}, {5, 0.0880}, {6, 0.0648}, {10, 0.0401}, {21, 0.0208}}
	const delta1 = 1.0299 // Noll 1976 Table IV
	pc, err := pupilCovFor(20, 0, math.Inf(1))
	if err != nil {
		t.Fatal(err)
	}
	if rel := pc.total/delta1 - 1; math.Abs(rel) > 0.01 {
		t.Errorf("quadrature Δ1 = %.5f, Noll 1976 Table IV 1.0299 (rel %.3g)", pc.total, rel)
	}
	for _, c := range table {
		kl, err := newQuadrature(KindKL, c.J-1, 16, 8, Aperture{})
		if err != nil {
			t.Fatal(err)
		}
		var s float64
		for _, v := range kl.Variance {
			s += v
		}
		if rel := (pc.total-s)/c.delta - 1; math.Abs(rel) > 0.03 {
			t.Errorf("J = %d: quadrature residual %.5f, Noll Δ_J = %.4f (rel %.3g)", c.J, pc.total-s, c.delta, rel)
		}
	}
	t.Logf("quadrature Δ1 = %.5f (Table IV 1.0299)", pc.total)
}

// (c) Obscured pupil: the KL modes are orthonormal over the annulus in the
// quadrature (VᵀGV = I), the covariance is diagonal in the new basis,
// eigenvalues decrease, and each mode is signed as New signs its modes.
func TestQuadratureObscuredKL(t *testing.T) {
	const count = 35
	for _, ap := range []Aperture{{Obscuration: 0.3}, {Obscuration: 0.3, OuterScale: 20}} {
		pc, err := pupilCovFor(count, ap.Obscuration, ap.l0())
		if err != nil {
			t.Fatal(err)
		}
		var vgv, vcv mat.Dense
		vgv.Mul(pc.v.T(), pc.g)
		vgv.Mul(&vgv, pc.v)
		vcv.Mul(pc.v.T(), pc.c)
		vcv.Mul(&vcv, pc.v)
		for i := 0; i < count; i++ {
			for k := 0; k < count; k++ {
				wantI, wantC := 0.0, 0.0
				if i == k {
					wantI, wantC = 1, pc.vals[i]
				}
				if d := math.Abs(vgv.At(i, k) - wantI); d > 1e-10 {
					t.Fatalf("%+v: (VᵀGV)(%d,%d) = %g", ap, i, k, vgv.At(i, k))
				}
				if d := math.Abs(vcv.At(i, k) - wantC); d > 1e-9*pc.vals[0] {
					t.Fatalf("%+v: (VᵀCV)(%d,%d) = %g, want %g", ap, i, k, vcv.At(i, k), wantC)
				}
			}
			if i > 0 && pc.vals[i] > pc.vals[i-1] {
				t.Fatalf("%+v: eigenvalues increase at %d", ap, i)
			}
			// Sign convention as New: largest-magnitude component positive.
			best, bi := -1.0, 0
			for k := 0; k < count; k++ {
				if a := math.Abs(pc.v.At(k, i)); a > best+1e-12 {
					best, bi = a, k
				}
			}
			if pc.v.At(bi, i) < 0 {
				t.Fatalf("%+v: mode %d has a negative dominant component", ap, i)
			}
		}
	}
}

// Sampled on a fine grid, the obscured-pupil KL modes are orthonormal in the
// pixel mean over Support (edge pixels make an O(1/R) error, as for the
// Zernikes on the disc).
func TestObscuredKLSampledOrthonormal(t *testing.T) {
	const count = 35
	b, err := NewFor(KindKL, count, 302, 150, Aperture{Obscuration: 0.3})
	if err != nil {
		t.Fatal(err)
	}
	np := float64(len(b.Support))
	if rel := np/(math.Pi*150*150*(1-0.09)) - 1; math.Abs(rel) > 2e-3 {
		t.Errorf("annulus holds %v pixels, π R²(1−ε²) = %v", np, math.Pi*150*150*0.91)
	}
	worst := 0.0
	for i := 0; i < count; i++ {
		for j := i; j < count; j++ {
			var s float64
			for _, idx := range b.Support {
				s += b.Modes[i][idx] * b.Modes[j][idx]
			}
			want := 0.0
			if i == j {
				want = 1
			}
			worst = math.Max(worst, math.Abs(s/np-want))
		}
	}
	if worst > 2e-2 {
		t.Errorf("sampled KL modes: orthonormality error %.3g over the annulus, want ≤ 2e-2", worst)
	}
	t.Logf("sampled orthonormality error over the annulus (R = 150 px): %.3g", worst)
}

// spectralZernikeVariance returns <a_j²> in (D/r0)^(5/3) rad² for a clear
// aperture and outer scale l0 = L0/D from the spectrum and the Zernike
// Fourier transform |Q_j(k)|² = (n+1)[J_{n+1}(2πk)/(πk)]² (k in cycles per
// pupil radius, angular factor averaged; Noll 1976, from memory — its
// Parseval check ∫|Q|² = 1/π holds):
//
//	<a_j²> = 2π(n+1)·c·2^(−5/3) ∫_0^∞ k (k² + (1/(2 l0))²)^(−11/6) [J_{n+1}(2πk)/(πk)]² dk,
//
// c = SpectrumConstant(). It uses neither the structure function nor the
// polar quadrature.
func spectralZernikeVariance(j int, l0 float64) float64 {
	n, _ := NollToNM(j)
	k0 := 0.0
	if !math.IsInf(l0, 1) {
		k0 = 1 / (2 * l0)
	}
	g := func(k float64) float64 {
		q := math.Jn(n+1, 2*math.Pi*k) / (math.Pi * k)
		return k * math.Pow(k*k+k0*k0, -11.0/6) * q * q
	}
	s := glPanels(func(t float64) float64 { return 3 * t * t * g(t*t*t) }, 0, 1, 0.1, 20)
	s += glPanels(g, 1, 400, 0.25, 12)
	return 2 * math.Pi * float64(n+1) * SpectrumConstant() * math.Pow(2, -5.0/3) * s
}

// (d) Finite outer scale: the quadrature's Zernike variances for a clear
// aperture agree with an independent spectral computation (above), and the
// tilt variance drops with L0/D. Measured reductions are logged.
func TestOuterScaleMatchesSpectrum(t *testing.T) {
	tilt := map[float64]float64{}
	for _, l0 := range []float64{math.Inf(1), 30, 10, 3} {
		z, err := newQuadrature(KindZernike, 10, 16, 8, Aperture{OuterScale: l0})
		if err != nil {
			t.Fatal(err)
		}
		for _, i := range []int{0, 2, 5, 9} { // Z2, Z4, Z7, Z11
			want := spectralZernikeVariance(i+2, l0)
			if rel := z.Variance[i]/want - 1; math.Abs(rel) > 1e-4 {
				t.Errorf("L0/D = %g, Z%d: quadrature %.7f, spectrum %.7f (rel %.2g)", l0, i+2, z.Variance[i], want, rel)
			}
		}
		tilt[l0] = z.Variance[0]
	}
	for _, l0 := range []float64{30, 10, 3} {
		if !(tilt[l0] < tilt[math.Inf(1)]) {
			t.Errorf("tilt variance at L0/D = %g (%g) not below Kolmogorov (%g)", l0, tilt[l0], tilt[math.Inf(1)])
		}
	}
	// Small-D/L0 law of the tilt variance, 1 − 0.77 x^(1/3) + 0.0847 x²
	// with x = 2πD/L0 (Sasiela 1994; Winker 1991 — from memory), within 0.5 %.
	for _, l0 := range []float64{30, 100, 1000} {
		z, err := newQuadrature(KindZernike, 2, 16, 8, Aperture{OuterScale: l0})
		if err != nil {
			t.Fatal(err)
		}
		x := 2 * math.Pi / l0
		want := 1 - 0.77*math.Cbrt(x) + 0.0847*x*x
		if got := z.Variance[0] / tilt[math.Inf(1)]; math.Abs(got/want-1) > 0.005 {
			t.Errorf("L0/D = %g: tilt reduced ×%.4f, small-D/L0 law ×%.4f", l0, got, want)
		}
	}
	t.Logf("tilt variance: Kolmogorov %.4f; L0/D 30: ×%.3f, 10: ×%.3f, 3: ×%.3f", tilt[math.Inf(1)],
		tilt[30]/tilt[math.Inf(1)], tilt[10]/tilt[math.Inf(1)], tilt[3]/tilt[math.Inf(1)])
}

// pointCov returns the Gram and covariance matrices of the Zernikes js (Noll
// j) over the annulus ε ≤ ρ ≤ 1 from a weighted point set (x, y, weight):
// the weighted annulus mean removed, G = Σ W Z̃_i Z̃_j / ΣW and the double sum
// C = −½ Σ_p Σ_q W_p W_q Z̃_i(p) D(p−q) Z̃_j(q) / (ΣW)², D from PhaseStructure
// with D = 1 m, r0 = 1 m (units (D/r0)^(5/3) rad²). No angular reduction, no
// cos/sin selection rules, no kernel tables: a brute-force check of quadCov.
func pointCov(js []int, x, y, wt []float64, l0 float64) (g, c [][]float64) {
	m := len(x)
	var wsum float64
	for _, w := range wt {
		wsum += w
	}
	z := make([][]float64, len(js))
	for a, j := range js {
		z[a] = make([]float64, m)
		var mean float64
		for p := range z[a] {
			z[a][p] = Zernike(j, math.Hypot(x[p], y[p]), math.Atan2(y[p], x[p]))
			mean += wt[p] * z[a][p] / wsum
		}
		for p := range z[a] {
			z[a][p] -= mean
		}
	}
	tz := make([][]float64, len(js)) // tz[a][p] = Σ_q W_q D(p,q) z[a][q]
	for a := range tz {
		tz[a] = make([]float64, m)
	}
	for p := 0; p < m; p++ {
		for q := p + 1; q < m; q++ {
			d := PhaseStructure(math.Hypot(x[p]-x[q], y[p]-y[q])/2, 1, l0)
			for a := range js {
				tz[a][p] += d * wt[q] * z[a][q]
				tz[a][q] += d * wt[p] * z[a][p]
			}
		}
	}
	g, c = make([][]float64, len(js)), make([][]float64, len(js))
	for a := range js {
		g[a], c[a] = make([]float64, len(js)), make([]float64, len(js))
		for e := range js {
			for p := 0; p < m; p++ {
				g[a][e] += wt[p] * z[a][p] * z[e][p] / wsum
				c[a][e] += -0.5 * wt[p] * z[a][p] * tz[e][p] / (wsum * wsum)
			}
		}
	}
	return g, c
}

// polarPoints returns a tensor grid on the annulus: nr Gauss–Legendre radii
// on [ε, 1] times nt equally spaced angles (offset by half a step), with
// weights w_a ρ_a 2π/nt.
func polarPoints(eps float64, nr, nt int) (x, y, wt []float64) {
	r := make([]float64, nr)
	w := make([]float64, nr)
	quad.Legendre{}.FixedLocations(r, w, eps, 1)
	for a := range r {
		for p := 0; p < nt; p++ {
			s, c := math.Sincos(2 * math.Pi * (float64(p) + 0.5) / float64(nt))
			x, y = append(x, r[a]*c), append(y, r[a]*s)
			wt = append(wt, w[a]*r[a]*2*math.Pi/float64(nt))
		}
	}
	return x, y, wt
}

// pixelPoints returns the pixel centres of the annulus (Basis.Support rule)
// on a grid of pupil radius R px, in units of the radius, with unit weights.
func pixelPoints(eps, R float64) (x, y, wt []float64) {
	b := &Basis{N: int(2*R) + 2, Radius: R, Count: 1}
	b.sample(eps)
	ctr := float64(b.N / 2)
	for _, idx := range b.Support {
		x = append(x, (float64(idx%b.N)-ctr)/R)
		y = append(y, (float64(idx/b.N)-ctr)/R)
		wt = append(wt, 1)
	}
	return x, y, wt
}

// covDiff returns the largest difference between (g, c) for the Noll
// indices js and the quadrature pc, relative to sqrt(diag·diag).
func covDiff(js []int, g, c [][]float64, pc *pupilCov) (dg, dc float64) {
	for a, ja := range js {
		for e, je := range js {
			sg := math.Sqrt(pc.g.At(ja-2, ja-2) * pc.g.At(je-2, je-2))
			sc := math.Sqrt(pc.c.At(ja-2, ja-2) * pc.c.At(je-2, je-2))
			dg = math.Max(dg, math.Abs(g[a][e]-pc.g.At(ja-2, je-2))/sg)
			dc = math.Max(dc, math.Abs(c[a][e]-pc.c.At(ja-2, je-2))/sc)
		}
	}
	if math.IsNaN(dg) || math.IsNaN(dc) { // a negative diagonal: not a covariance
		return math.Inf(1), math.Inf(1)
	}
	return dg, dc
}

// The polar reduction of G and C over an obscured pupil with a finite outer
// scale agrees with brute-force double sums over point sets: a 2-D polar
// grid (16 radii × 64 angles; measured 4.7e-4, the grid's own error near
// coincident points; tolerance 1.5e-3) and pixel centres (R = 12 and 24 px:
// the pixel sums carry an edge error that must shrink towards the quadrature,
// measured 0.40 → 0.17, and stay below 0.25).
func TestQuadratureMatchesPointSums(t *testing.T) {
	js := []int{2, 3, 4, 7, 8, 11, 12} // tilts, defocus, comas (couple with tilts), spherical, astigmatism
	const eps, l0 = 0.3, 5.0
	pc, err := pupilCovFor(11, eps, l0)
	if err != nil {
		t.Fatal(err)
	}
	x, y, wt := polarPoints(eps, 16, 64)
	g, c := pointCov(js, x, y, wt, l0)
	dg, dc := covDiff(js, g, c, pc)
	if dg > 1e-9 || dc > 1.5e-3 {
		t.Errorf("polar point sums differ from the quadrature: Gram %.3g, covariance %.3g (relative)", dg, dc)
	}
	t.Logf("polar point sums vs quadrature: Gram %.2g, covariance %.2g", dg, dc)
	var prev float64
	for _, R := range []float64{12, 24} {
		x, y, wt := pixelPoints(eps, R)
		g, c := pointCov(js, x, y, wt, l0)
		dg, dc := covDiff(js, g, c, pc)
		if dc > 0.6*prev && prev > 0 || dc > 0.25 && R == 24 {
			t.Errorf("R = %g px: pixel sums differ from the quadrature by %.3g (R/2: %.3g)", R, dc, prev)
		}
		t.Logf("pixel sums (R = %g px) vs quadrature: Gram %.2g, covariance %.2g", R, dg, dc)
		prev = dc
	}
}

// (e) With a non-orthogonal ToNoll: Phase → Project (default mask = the
// annulus) recovers the native coefficients; the Zernike phase of the Noll
// equivalents equals the KL phase up to a constant over the annulus; and
// ToNoll⁻¹ maps them back.
func TestAnnularProjectNollRoundTrip(t *testing.T) {
	const count = 27
	ap := Aperture{Obscuration: 0.3, OuterScale: 25}
	kl, err := NewFor(KindKL, count, 64, 20, ap)
	if err != nil {
		t.Fatal(err)
	}
	z, err := NewFor(KindZernike, count, 64, 20, ap)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(7, 8))
	native := make([]float64, count)
	for i := range native {
		native[i] = rng.NormFloat64() * math.Sqrt(kl.Variance[i])
	}
	phase := make([]float64, 64*64)
	kl.Phase(phase, native)
	inSupport := make([]bool, 64*64)
	for _, i := range kl.Support {
		inSupport[i] = true
	}
	for _, i := range kl.Index { // garbage in the hole must not matter
		if !inSupport[i] {
			phase[i] = 10 * rng.NormFloat64()
		}
	}
	got := make([]float64, count)
	kl.Project(got, phase, nil)
	for i := range got {
		if math.Abs(got[i]-native[i]) > 1e-9 {
			t.Fatalf("Project over the annulus: coef %d = %g, want %g", i, got[i], native[i])
		}
	}
	noll := make([]float64, count)
	kl.NollEquivalent(noll, native)
	kl.Phase(phase, native)
	zp := make([]float64, 64*64)
	z.Phase(zp, noll)
	var off float64
	for _, i := range kl.Support {
		off += (zp[i] - phase[i]) / float64(len(kl.Support))
	}
	for _, i := range kl.Support {
		if d := zp[i] - phase[i] - off; math.Abs(d) > 1e-12 {
			t.Fatalf("pixel %d: Zernike phase of the Noll equivalent differs from the KL phase by %g beyond a piston", i, d)
		}
	}
	var back mat.VecDense
	if err := back.SolveVec(kl.ToNoll, mat.NewVecDense(count, noll)); err != nil {
		t.Fatal(err)
	}
	for i := range native {
		if math.Abs(back.AtVec(i)-native[i]) > 1e-10 {
			t.Fatalf("ToNoll⁻¹ round trip: coef %d = %g, want %g", i, back.AtVec(i), native[i])
		}
	}
}

// The KL and Zernike bases of one aperture imply the same Zernike
// covariance: diag(VΛVᵀ) is the Zernike Variance diag(G⁻¹CG⁻¹), since
// VᵀGV = I gives VVᵀ = G⁻¹.
func TestAnnularKLZernikeConsistent(t *testing.T) {
	const count = 27
	ap := Aperture{Obscuration: 0.3, OuterScale: 25}
	kl, err := NewFor(KindKL, count, 16, 8, ap)
	if err != nil {
		t.Fatal(err)
	}
	z, err := NewFor(KindZernike, count, 16, 8, ap)
	if err != nil {
		t.Fatal(err)
	}
	var cov mat.Dense
	cov.Mul(kl.ToNoll, mat.NewDiagDense(count, kl.Variance))
	cov.Mul(&cov, kl.ToNoll.T())
	for i := 0; i < count; i++ {
		if rel := cov.At(i, i)/z.Variance[i] - 1; math.Abs(rel) > 1e-9 {
			t.Fatalf("Z%d: diag(VΛVᵀ) = %g, Zernike Variance %g", i+2, cov.At(i, i), z.Variance[i])
		}
	}
}

// ZernikeCovariance: eq. 25 for the clear Kolmogorov case; otherwise
// symmetric positive definite with NewFor's Zernike variances on the diagonal.
func TestZernikeCovariance(t *testing.T) {
	c, err := ZernikeCovariance(20, Aperture{})
	if err != nil || !mat.EqualApprox(c, NollCovarianceMatrix(20), 0) {
		t.Fatalf("clear Kolmogorov: err %v or not NollCovarianceMatrix", err)
	}
	ap := Aperture{Obscuration: 0.4, OuterScale: 15}
	c, err = ZernikeCovariance(20, ap)
	if err != nil {
		t.Fatal(err)
	}
	z, _ := NewFor(KindZernike, 20, 16, 8, ap)
	for i := 0; i < 20; i++ {
		if c.At(i, i) != z.Variance[i] {
			t.Fatalf("Z%d: covariance diagonal %g, Variance %g", i+2, c.At(i, i), z.Variance[i])
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(c) {
		t.Error("annulus Zernike covariance not positive definite")
	}
	c.SetSym(0, 0, -1) // a copy: the cache is untouched
	if again, _ := ZernikeCovariance(20, ap); again.At(0, 0) != z.Variance[0] {
		t.Error("ZernikeCovariance returned the cached matrix")
	}
	for _, bad := range []Aperture{{Obscuration: 0.95}, {OuterScale: -2}} {
		if _, err := ZernikeCovariance(20, bad); err == nil {
			t.Errorf("aperture %+v accepted", bad)
		}
	}
	if _, err := ZernikeCovariance(0, ap); err == nil {
		t.Error("0 modes accepted")
	}
}

// Cold build of a 36-mode KL basis for an obscured pupil with an outer scale
// on a 64-pixel grid (quadrature, eigenproblem and sampling; cache bypassed).
func BenchmarkNewForKL36(b *testing.B) {
	for i := 0; i < b.N; i++ {
		covMu.Lock()
		clear(covCache)
		covMu.Unlock()
		if _, err := NewFor(KindKL, 36, 64, 15.5, Aperture{Obscuration: 0.15, OuterScale: 60}); err != nil {
			b.Fatal(err)
		}
	}
}
