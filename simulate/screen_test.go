package simulate

import (
	"math"
	"math/rand/v2"
	"testing"
)

// meanSF returns the structure function of screens with parameters p at
// the separations seps (pixels), averaged over 2·pairs screens.
func meanSF(t *testing.T, p ScreenParams, pairs int, seps []int, seed uint64) []float64 {
	t.Helper()
	g, err := NewScreenGenerator(p)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 7))
	a := make([]float64, p.N*p.N)
	b := make([]float64, p.N*p.N)
	sum := make([]float64, len(seps))
	for k := 0; k < pairs; k++ {
		g.GeneratePair(a, b, rng)
		for i, r := range seps {
			sum[i] += sfLag(a, p.N, r) + sfLag(b, p.N, r)
		}
	}
	for i := range sum {
		sum[i] /= float64(2 * pairs)
	}
	return sum
}

// TestStructureFunction compares the mean structure function of FFT
// screens with the Kolmogorov law D(r) = 6.88 (r/r0)^(5/3) (Fried 1965,
// JOSA 55, 1427) on a 256² screen with r0 = 16 px and L0 = ∞.
//
// Measured (300 screens per row, seeds 11–14; ratios D/Dtheory):
//
//	r (px)              1     2     4     8    16    32    64   128
//	no subharmonics   0.77  0.78  0.74  0.68  0.60  0.49  0.35  0.17
//	3 levels          0.88  0.91  0.91  0.89  0.87  0.83  0.78  0.70
//	8 levels          0.92  0.97  0.98  0.98  0.98  0.97  0.95  0.88   (seed 11)
//	                  0.93  0.98  0.99  0.99  0.99  0.99  0.99  0.99   (best of 12–14)
//
// With 8 levels the law holds within 4 % for 2 ≤ r ≤ N/8 px, within 6 % to
// N/4 and within 12 % to N/2 (the large-r scatter between runs is that of
// the few largest scales per screen). At r = 1 px about 7 % is missing because the grid carries no
// power beyond its Nyquist frequency (2·∫_{κ>κN} Φ d²κ ≈ 0.17 (r0 κN)^(−5/3)
// rad², from the PSD). With 3 levels the law holds within 15 % for
// 1 ≤ r ≤ N/16 only. Without subharmonics the screens fall short
// everywhere, increasingly with r, since the power of the central frequency
// cell (≈ 1.24 (r·0.56Δκ)^(1/3) of D, see ScreenGenerator) is missing.
func TestStructureFunction(t *testing.T) {
	const sfSeed = 11
	const n = 256
	const r0 = 16.0
	seps := []int{1, 2, 4, 8, 16, 32, 64, 128}
	pairs := 150
	if testing.Short() {
		pairs = 60
	}
	ratio := func(p ScreenParams) []float64 {
		d := meanSF(t, p, pairs, seps, sfSeed)
		for i, r := range seps {
			d[i] /= StructureFunction(float64(r), r0)
		}
		return d
	}
	base := ScreenParams{N: n, Dx: 1, R0: r0}
	none := ratio(base)
	p3 := base
	p3.Subharmonics = true
	three := ratio(p3)
	p8 := p3
	p8.Levels = 8
	eight := ratio(p8)
	t.Logf("r:      %v", seps)
	t.Logf("none:   %.3f", none)
	t.Logf("3 lev:  %.3f", three)
	t.Logf("8 lev:  %.3f", eight)
	for i, r := range seps {
		// Bounds: measured values above with room for the sampling error
		// of the mean over the screens (a few % at large r).
		lo, hi := 0.95, 1.03
		switch r {
		case 1:
			lo, hi = 0.88, 0.97 // Nyquist cut, see above
		case 64:
			lo = 0.92
		case 128:
			lo = 0.85
		}
		if eight[i] < lo || eight[i] > hi {
			t.Errorf("8 levels: D(%d px)/theory = %.3f, want in [%.2f, %.2f]", r, eight[i], lo, hi)
		}
		if !(none[i] < three[i] && three[i] < eight[i]) {
			t.Errorf("r = %d px: ratios none %.3f, 3 levels %.3f, 8 levels %.3f not increasing", r, none[i], three[i], eight[i])
		}
	}
	// Without subharmonics the low orders are missing: short by more than
	// half at r = N/4 and more at N/2.
	if none[6] > 0.5 || none[7] > 0.3 {
		t.Errorf("no subharmonics: D(N/4)/theory = %.3f, D(N/2)/theory = %.3f; expected < 0.5 and < 0.3", none[6], none[7])
	}
}

// TestVonKarmanVariance checks the normalisation of von Kármán screens
// against the integral of the PSD Φ of PhasePSD (von Kármán, κ0 = 1/L0):
//
//	σ² = ∫Φ d²κ = (3/5)·2π·0.023 r0^(−5/3) κ0^(−5/3) = 0.0867 (L0/r0)^(5/3) rad²
//
// (quoted as 0.0863 with the constant 0.0229, common practice). The grid
// holds no power beyond its Nyquist frequency κN: the disc beyond κN
// carries the fraction (1 + (κN L0)²)^(−5/6), the disc beyond √2 κN (the
// grid corners) less; we expect the variance between the two. The screen
// is 8 L0 wide so the κ = 0 cell matters little (the subharmonics cover it).
func TestVonKarmanVariance(t *testing.T) {
	p := ScreenParams{N: 256, Dx: 1, R0: 4, L0: 32, Subharmonics: true}
	g, err := NewScreenGenerator(p)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	a := make([]float64, p.N*p.N)
	b := make([]float64, p.N*p.N)
	var sum float64
	const pairs = 100
	for k := 0; k < pairs; k++ {
		g.GeneratePair(a, b, rng)
		for i := range a {
			sum += a[i]*a[i] + b[i]*b[i]
		}
	}
	got := sum / float64(2*pairs*p.N*p.N)
	total := 0.6 * 2 * math.Pi * 0.023 * math.Pow(p.L0/p.R0, 5.0/3)
	kn := 0.5 / p.Dx
	hi := total * (1 - math.Pow(1+kn*kn*p.L0*p.L0, -5.0/6))
	lo := total * (1 - math.Pow(1+2*kn*kn*p.L0*p.L0, -5.0/6))
	lo, hi = math.Min(lo, hi), math.Max(lo, hi)
	// 200 screens of 8 L0 × 8 L0: the mean variance scatters by ≈ 1.5 %
	// (about 64 correlation areas per screen); allow 4 %.
	if got < lo*0.96 || got > hi*1.04 {
		t.Errorf("screen variance %.4f rad², want in [%.4f, %.4f] (0.0867 (L0/r0)^(5/3) less the Nyquist cut) ± 4 %%", got, lo, hi)
	}
	t.Logf("von Kármán variance %.4f rad², theory %.4f (%.4f–%.4f after the Nyquist cut)", got, total, lo, hi)
}

func TestScreenParamsValidate(t *testing.T) {
	bad := []ScreenParams{
		{N: 1, Dx: 1, R0: 1},
		{N: 8, Dx: 0, R0: 1},
		{N: 8, Dx: 1, R0: -1},
		{N: 8, Dx: 1, R0: 1, L0: math.NaN()},
		{N: 8, Dx: 1, R0: 1, Subharmonics: true, Levels: 13},
	}
	for _, p := range bad {
		if _, err := NewScreenGenerator(p); err == nil {
			t.Errorf("%+v: no error", p)
		}
	}
}

// TestWindowMatchesAt checks AddWindow against the pointwise bilinear At,
// including wrap-around and negative positions.
func TestWindowMatchesAt(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	s, err := NewScreen(rng, ScreenParams{N: 32, Dx: 0.01, R0: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	const n = 8
	w := make([]float64, n*n)
	for _, o := range [][2]float64{{0, 0}, {3.25, -7.5}, {29.9, 30.6}, {-100.3, 64.01}} {
		clear(w)
		s.AddWindow(w, n, o[0], o[1])
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				want := s.At(o[0]+float64(x), o[1]+float64(y))
				if math.Abs(w[y*n+x]-want) > 1e-12 {
					t.Fatalf("offset %v pixel (%d,%d): window %g, At %g", o, x, y, w[y*n+x], want)
				}
			}
		}
	}
	// At on the grid returns the samples.
	if s.At(5, 7) != s.Data[7*32+5] || s.At(-27, 39) != s.Data[7*32+5] {
		t.Errorf("At on grid points does not return the samples")
	}
}
