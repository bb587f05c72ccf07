package simulate

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// granulationSample measures k default granulation scenes of n×n px at ps
// arcsec/px (fixed seeds) and returns their statistics averaged, with
// the size percentiles and counts pooled the same way.
func granulationSample(t *testing.T, p GranulationParams, n, k int, ps float64) granStats {
	t.Helper()
	im := make([]float64, n*n)
	var sum granStats
	for s := 0; s < k; s++ {
		if err := Granulation(im, n, n, ps, p, rand.New(rand.NewPCG(uint64(s), 9))); err != nil {
			t.Fatal(err)
		}
		st := measureGranulation(im, n, ps)
		for _, f := range []struct{ dst, v *float64 }{
			{&sum.CellMean, &st.CellMean}, {&sum.CellP10, &st.CellP10}, {&sum.CellP90, &st.CellP90},
			{&sum.GranMean, &st.GranMean}, {&sum.PeakScale, &st.PeakScale}, {&sum.Slope, &st.Slope},
			{&sum.MesoSlope, &st.MesoSlope}, {&sum.Skew, &st.Skew}, {&sum.Bright, &st.Bright},
		} {
			*f.dst += *f.v / float64(k)
		}
		sum.Cells += st.Cells
		sum.Granules += st.Granules
	}
	return sum
}

// TestGranulationStatistics measures default granulation (0.06 arcsec/px,
// four 512² scenes) as an observer would and checks it against published
// statistics of the quiet-Sun continuum:
//
//   - mean cell size (granule plus half its lanes, equivalent diameter)
//     1.6–2.0 arcsec: mean cells of about 1.3–1.4 Mm, i.e. 1.8–1.9 arcsec
//     at 725 km/arcsec (from memory: Bray, Loughhead & Durrant 1984, The
//     Solar Granulation; Hirzberger et al. 1997, ApJ 480, 406);
//   - a spread of sizes: granules of 0.5–2.5 Mm (0.7–3.4 arcsec) with many
//     small ones (Roudier & Muller 1986, Sol. Phys. 107, 11; from memory),
//     so the 10th percentile of cell diameters below 1.2 arcsec, the 90th
//     above 2.4 and their ratio at least 2 (a single-size pattern gives
//     ≈ 1.5);
//   - granules (brighter than the mean) of 1.0–1.6 arcsec mean diameter
//     (about 1 Mm; from memory, same sources);
//   - the one-dimensional power spectrum E(k) peaking at granular scales,
//     between the breaks at 3 and 1.4 arcsec of Espagnet et al. 1993
//     (A&A 271, 589), with a margin: 1.4–3.2 arcsec; beyond it a steep
//     power law, E ∝ k^−3 at 525 nm and k^−17/3 at 450 nm between scales
//     of about 1.4 and 0.55 arcsec (Rieutord et al. 2010, A&A 512, A4;
//     Espagnet et al. 1993): slope between −6 and −2.3 from 1.2 to 0.5
//     arcsec; and rising at mesogranular scales, E ∝ k² between 2.5 and
//     10 Mm (Rieutord et al. 2010): slope from 12 to 4 arcsec above 0.5;
//   - 47 % of the area brighter than the mean, and a nearly symmetric
//     histogram peaking at 0.998 of the mean (Hirzberger 2002, A&A, "On
//     the brightness and velocity structure of solar granulation", Sects.
//     3–5; volume 392 from memory; the segmented granular area is 39–60 %
//     depending on the method): bright fraction 0.42–0.60 and |skewness|
//     below 0.5. Expected sign: the dark narrow lanes make a dark tail
//     (negative skew), the bright granule centres and bright points a
//     bright tail; with granules covering about half the area the two
//     nearly cancel, and 47 % above the mean means mean > median, i.e. a
//     slightly positive skew in the observations.
func TestGranulationStatistics(t *testing.T) {
	k := 4
	if testing.Short() {
		k = 2
	}
	st := granulationSample(t, GranulationParams{}, 512, k, 0.06)
	t.Logf("cells %d: mean %.2f\", P10 %.2f\", P90 %.2f\" (ratio %.2f); granules %d: mean %.2f\"",
		st.Cells, st.CellMean, st.CellP10, st.CellP90, st.CellP90/st.CellP10, st.Granules, st.GranMean)
	t.Logf("E(k) peak at %.2f\", slope %.2f (1.2–0.5\"), %.2f (12–4\"); skew %.3f, bright fraction %.3f",
		st.PeakScale, st.Slope, st.MesoSlope, st.Skew, st.Bright)
	check := func(name string, v, lo, hi float64) {
		if !(v >= lo && v <= hi) {
			t.Errorf("%s %.3f, want %g–%g", name, v, lo, hi)
		}
	}
	check("mean cell diameter (arcsec)", st.CellMean, 1.6, 2.0)
	check("10th percentile of cell diameters (arcsec)", st.CellP10, 0, 1.2)
	check("90th percentile of cell diameters (arcsec)", st.CellP90, 2.4, 4)
	check("P90/P10 of cell diameters", st.CellP90/st.CellP10, 2, 5)
	check("mean granule diameter (arcsec)", st.GranMean, 1.0, 1.6)
	check("E(k) peak scale (arcsec)", st.PeakScale, 1.4, 3.2)
	check("E(k) slope beyond the peak", st.Slope, -6, -2.3)
	check("E(k) slope at mesogranular scales", st.MesoSlope, 0.5, 4)
	check("bright area fraction", st.Bright, 0.42, 0.60)
	check("intensity skewness", st.Skew, -0.5, 0.5)
}

// diffractionLimited returns the central (m−p)² region of the focused,
// turbulence-free image of the m×m object through the simulator's pupil
// (cyclic convolution; the crop leaves out the wrapped border of the PSF
// support p = Oversample·N).
func diffractionLimited(s *Simulator, obj []float64, m int) ([]float64, int) {
	f := s.newFormer(m)
	spec := make([]complex128, m*m)
	f.plan.ForwardReal(spec, obj)
	f.psfs(s, make([]float64, f.p*f.p))
	f.blurPair(spec)
	n := f.p // PSF support on the imaging grid
	w := m - n
	out := make([]float64, w*w)
	for y := 0; y < w; y++ {
		for x := 0; x < w; x++ {
			out[y*w+x] = real(f.buf[(y+n/2)*m+x+n/2])
		}
	}
	return out, w
}

// TestGranulationDiffractionLimit images default granulation at the demo
// site's sampling (0.12 arcsec/px) through the 0.5 m pupil at 600 nm
// without turbulence and compares the contrast before and after: the
// intrinsic continuum contrast is 16.6–26.7 % (red to blue; Wedemeyer-Böhm
// & Rouppe van der Voort 2009, A&A 503, 225, deconvolved Hinode images),
// against 10–15 % at the diffraction limit of a 0.5 m class telescope
// (common practice), so the ratio lies between 1.1 and 2.7. At that
// resolution 47 % of the area is brighter than the mean (Hirzberger 2002,
// as in TestGranulationStatistics): bright fraction 0.42–0.52; the lanes
// are filled in, and mean > median means a positive skew (for a nearly
// normal histogram, Pearson's 3(mean − median)/σ ≈ 0.2): skew 0–0.7.
func TestGranulationDiffractionLimit(t *testing.T) {
	s := newSim(t, demoConfig())
	const m = 256
	obj := make([]float64, m*m)
	var ratio, skew, bright float64
	const k = 3
	for i := 0; i < k; i++ {
		if err := Granulation(obj, m, m, 0.12, GranulationParams{}, rand.New(rand.NewPCG(uint64(i), 4))); err != nil {
			t.Fatal(err)
		}
		dl, _ := diffractionLimited(s, obj, m)
		ratio += Contrast(obj) / Contrast(dl) / k
		skew += stat.Skew(dl, nil) / k
		bright += fracAbove(dl) / k
	}
	t.Logf("intrinsic/diffraction-limited contrast %.2f; at the diffraction limit skew %.3f, bright fraction %.3f", ratio, skew, bright)
	if ratio < 1.1 || ratio > 2.7 {
		t.Errorf("contrast ratio %.2f, want 1.1–2.7", ratio)
	}
	if skew < 0 || skew > 0.7 || bright < 0.42 || bright > 0.52 {
		t.Errorf("diffraction-limited skew %.3f, bright fraction %.3f; want 0–0.7 and 0.42–0.52", skew, bright)
	}
}

// TestGranulationScale checks that the measured mean cell diameter follows
// CellSize (within 12 %, the scatter of one 512² scene being ≈ 4 %; our
// construction), that the scene has the requested rms contrast, and that
// bad parameters are refused.
func TestGranulationScale(t *testing.T) {
	const n = 512
	const ps = 0.06
	im := make([]float64, n*n)
	for _, cell := range []float64{1.2, 2.4} {
		p := GranulationParams{CellSize: cell, Contrast: 0.1}
		if err := Granulation(im, n, n, ps, p, rand.New(rand.NewPCG(6, 6))); err != nil {
			t.Fatal(err)
		}
		if c := Contrast(im); math.Abs(c-0.1) > 1e-3 {
			t.Errorf("cell %g: contrast %.4f, want 0.1", cell, c)
		}
		st := measureGranulation(im, n, ps)
		t.Logf("cell size %g\": measured mean %.3f\" over %d cells", cell, st.CellMean, st.Cells)
		if math.Abs(st.CellMean/cell-1) > 0.12 {
			t.Errorf("cell size %g\": measured mean cell %.3f\"", cell, st.CellMean)
		}
	}
	for _, p := range []GranulationParams{{CellSize: -1}, {LaneDepth: 1.5}, {SizeSpread: 2}, {Texture: math.NaN()},
		{Pores: -1}, {Mesoscale: 0.8}, {BrightPoints: math.Inf(1)}, {PoreSize: math.Inf(1)}} {
		if err := Granulation(im, n, n, ps, p, rand.New(rand.NewPCG(1, 1))); err == nil {
			t.Errorf("%+v: no error", p)
		}
	}
	if err := Granulation(im, n, n, 0.5, GranulationParams{CellSize: 0.8}, rand.New(rand.NewPCG(1, 1))); err == nil {
		t.Error("cells under 2 px: no error")
	}
	if err := Granulation(im, n, n, 0, GranulationParams{}, rand.New(rand.NewPCG(1, 1))); err == nil {
		t.Error("zero pixel scale: no error")
	}
}

// maxStep returns the largest difference between horizontal neighbours.
func maxStep(im []float64, n int) float64 {
	var m float64
	for y := 0; y < n; y++ {
		for x := 0; x+1 < n; x++ {
			m = math.Max(m, math.Abs(im[y*n+x+1]-im[y*n+x]))
		}
	}
	return m
}

// TestGranulationSmooth checks that there are no steps (hard cell edges):
// for a continuous scene the largest difference between neighbouring
// pixels shrinks in proportion to the pixel size, while a step keeps its
// height. Rendered at 0.02 and 0.01 arcsec/px (lanes 15 and 7.5 px wide),
// the ratio must be below 0.6 (continuous: ≈ 0.4, median of three scenes;
// common practice).
func TestGranulationSmooth(t *testing.T) {
	const n = 384
	ratios := make([]float64, 3)
	im := make([]float64, n*n)
	for s := range ratios {
		var step [2]float64
		for i, ps := range []float64{0.02, 0.01} {
			if err := Granulation(im, n, n, ps, GranulationParams{}, rand.New(rand.NewPCG(uint64(s), 5))); err != nil {
				t.Fatal(err)
			}
			step[i] = maxStep(im, n)
		}
		ratios[s] = step[1] / step[0]
	}
	slices.Sort(ratios)
	t.Logf("largest neighbour difference at 0.01\"/px over that at 0.02\"/px: %.3f", ratios)
	if ratios[1] > 0.6 {
		t.Errorf("median ratio %.3f: the scene has steps", ratios[1])
	}
}
