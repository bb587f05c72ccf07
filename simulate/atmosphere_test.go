package simulate

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

// Absolute scale of the layer geometry, through the public Atmosphere API
// (NewAtmosphere, Phase at a time and a field angle; the tests call
// newAtmosphere, which NewAtmosphere wraps, only to reuse screen
// generators). TestFrozenFlowAndAnisoplanatism's identity holds for any
// scale of the shifts; these compare the wavefront's decorrelation with
// Kolmogorov statistics, which fixes the scale: a layer displacement off
// by a factor k changes the structure functions by k^(5/3) (halved: 0.31).
//
// Two checks each:
//   - the law, against 6.88 (r/r0)^(5/3) (Fried 1965): screens are
//     Kolmogorov (L0 = ∞, 10 subharmonic levels via LevelsFor), lags of
//     2–12 px ≤ N/8 of the 128² screens NewAtmosphere makes here, where
//     TestStructureFunction finds the screens within 4 % of the law.
//     The largest scales of each atmosphere (the subharmonics) make one
//     atmosphere's structure function scatter by 60–90 % (measured), so
//     the mean over 256 atmospheres has a standard error of 4–6 %; we
//     accept 0.80–1.15 (the screens' 2–8 % deficit at these lags, from
//     TestStructureFunction and bilinear smoothing, plus 3 standard errors).
//   - a ruler: the same atmospheres' spatial structure function within one
//     pupil-grid window at the lag the displacement should have, in pixels
//     of Atmosphere.Dx. The large scales are common to both, so the ratio
//     scatters little (standard error 0.4–2 %, measured); we accept 1 ± 6 %.
//
// Pupil grid 32², 2 cm pixels, r0 = 10 cm (5 px). Lags are whole pixels
// along x or y, so both windows of a difference share their bilinear
// weights. Measured with these seeds: temporal law 0.89, 0.95, 0.96 and
// ruler 0.998, 0.994, 0.987; three-layer law 1.045, 1.063; 6-km layer law
// 0.95, 0.94 and ruler 0.985, 0.964. With every displacement halved in
// Atmosphere.Phase all checks give 0.25–0.33; 5 % short, the rulers give
// 0.89–0.91.

const (
	geoN  = 32
	geoDx = 0.02 // m
	geoR0 = 0.10 // m
	geoAt = 256  // atmospheres
)

// meanSqDiff returns the mean of (a − b)² over all elements.
func meanSqDiff(a, b []float64) float64 {
	var s float64
	for i := range a {
		d := a[i] - b[i]
		s += d * d
	}
	return s / float64(len(a))
}

// sfAxis returns the mean of (φ(x + r·e) − φ(x))² over the pixel pairs of
// the n×n window φ separated by r pixels along e = x (alongY false) or y.
func sfAxis(phi []float64, n, r int, alongY bool) float64 {
	var sum float64
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			x2, y2 := x+r, y
			if alongY {
				x2, y2 = x, y+r
			}
			if x2 >= n || y2 >= n {
				continue
			}
			d := phi[y2*n+x2] - phi[y*n+x]
			sum += d * d
		}
	}
	return sum / float64(n*(n-r))
}

// checkGeometry applies the two checks (law and ruler) to the summed
// structure functions got and ruler of one lag.
func checkGeometry(t *testing.T, what string, got, ruler, law float64) {
	t.Helper()
	t.Logf("%s: %.4f rad²; law %.4f rad² (ratio %.3f); ruler %.4f rad² (ratio %.3f)", what, got, law, got/law, ruler, got/ruler)
	if r := got / law; r < 0.80 || r > 1.15 {
		t.Errorf("%s: %.4f rad² is %.3f × the law %.4f, want 0.80–1.15", what, got, r, law)
	}
	if r := got / ruler; math.Abs(r-1) > 0.06 {
		t.Errorf("%s: %.4f rad² is %.3f × the ruler %.4f, want 1 ± 0.06", what, got, r, ruler)
	}
}

// TestTemporalStructureFunction: one frozen layer at the ground moving at
// v = 10 m/s, along +x, +y, −x, −y in turn. The temporal structure function
// over the pupil grid, D(τ) = ⟨(φ(x, t+τ) − φ(x, t))²⟩, must equal the
// spatial one at the separation v·τ, 6.88 (v τ / r0)^(5/3) (Taylor's
// frozen-flow hypothesis with Fried 1965, JOSA 55, 1427), for v·τ = 2, 4
// and 8 pupil pixels; averaged over 8 start times per atmosphere. The ruler
// is the spatial structure function along the wind at v·τ/Dx pixels.
func TestTemporalStructureFunction(t *testing.T) {
	const v, starts = 10.0, 8
	step := geoDx / v // s per pixel of travel
	lags := []int{2, 4, 8}
	a := make([]float64, geoN*geoN)
	b := make([]float64, geoN*geoN)
	got := make([]float64, len(lags))
	ruler := make([]float64, len(lags))
	rng := rand.New(rand.NewPCG(31, 31))
	pool := &genPool{}
	for k := 0; k < geoAt; k++ {
		dir := float64(k%4) * math.Pi / 2
		turb := Turbulence{R0: geoR0, L0: math.Inf(1), Layers: []Layer{{Weight: 1, Speed: v, Direction: dir}}}
		ext := Extent{Duration: float64(3*(starts-1)+lags[len(lags)-1]) * step}
		atm, err := newAtmosphere(rng, turb, geoN, geoDx, ext, true, pool)
		if err != nil {
			t.Fatal(err)
		}
		for j := 0; j < starts; j++ {
			t0 := float64(3*j) * step
			atm.Phase(a, t0, 0, 0)
			for i, l := range lags {
				atm.Phase(b, t0+float64(l)*step, 0, 0)
				got[i] += meanSqDiff(a, b)
				ruler[i] += sfAxis(a, geoN, l, k%2 == 1)
			}
		}
	}
	for i, l := range lags {
		law := StructureFunction(float64(l)*geoDx, geoR0)
		checkGeometry(t, "D(τ) at v·τ = "+strconv.Itoa(l)+" px", got[i]/float64(geoAt*starts), ruler[i]/float64(geoAt*starts), law)
	}
}

// TestIsoplanaticAngle: layers at 0, 2 and 6 km with weights 0.5, 0.3 and
// 0.2 of r0^(−5/3) (and winds, at t = 10 ms). The angular structure
// function over the pupil grid, ⟨(φ(ϑ) − φ(0))²⟩, must be (ϑ/θ0)^(5/3) with
// θ0 = 0.314 r0 / h̄ and h̄ = (Σ w_i h_i^(5/3))^(3/5) (Fried 1982, JOSA 72,
// 52), for ϑ shifting the 2-km layer by 2 and 4 px (the 6-km layer by 6
// and 12 px), along ±x and ±y in turn. The ruler needs one layer: the same
// angles with the 6-km layer alone must decorrelate like the spatial
// structure function at h·ϑ/Dx = 6 and 12 px.
func TestIsoplanaticAngle(t *testing.T) {
	layers := []Layer{
		{Height: 0, Weight: 0.5, Speed: 4, Direction: 0.3},
		{Height: 2000, Weight: 0.3, Speed: 9, Direction: 2},
		{Height: 6000, Weight: 0.2, Speed: 15, Direction: 4},
	}
	var hs float64
	for _, l := range layers {
		hs += l.Weight * math.Pow(l.Height, 5.0/3)
	}
	theta0 := 0.314 * geoR0 / math.Pow(hs, 3.0/5)
	px := []int{2, 4} // shift of the 2-km layer, px
	for _, single := range []bool{false, true} {
		turb := Turbulence{R0: geoR0, L0: math.Inf(1), Layers: layers}
		if single {
			turb.Layers = layers[2:]
		}
		got, ruler := angularSF(t, turb, px)
		for i, p := range px {
			th := float64(p) * geoDx / 2000
			if single {
				law := StructureFunction(6000*th, geoR0)
				checkGeometry(t, "6-km layer alone, shift "+strconv.Itoa(3*p)+" px", got[i], ruler[i], law)
				continue
			}
			law := math.Pow(th/theta0, 5.0/3)
			t.Logf("three layers, ϑ = %.3g rad = %.2f θ0: %.4f rad², (ϑ/θ0)^(5/3) = %.4f rad², ratio %.3f", th, th/theta0, got[i], law, got[i]/law)
			if r := got[i] / law; r < 0.80 || r > 1.15 {
				t.Errorf("three layers, ϑ = %.3g rad: %.4f rad² is %.3f × (ϑ/θ0)^(5/3) = %.4f, want 0.80–1.15", th, got[i], r, law)
			}
		}
	}
}

// angularSF returns, for angles ϑ_i = px[i]·Dx/2000 m along ±x and ±y in
// turn, the mean over atmospheres of turb of ⟨(φ(ϑ) − φ(0))²⟩ at t = 10 ms,
// and the ruler: the spatial structure function at px[i]·h/2000 pixels
// along the same axis (h the height of the last layer).
func angularSF(t *testing.T, turb Turbulence, px []int) (got, ruler []float64) {
	const tm = 0.01
	maxAngle := float64(px[len(px)-1]) * geoDx / 2000
	ext := Extent{Duration: tm, FieldX: 2 * maxAngle, FieldY: 2 * maxAngle}
	h := turb.Layers[len(turb.Layers)-1].Height
	a := make([]float64, geoN*geoN)
	b := make([]float64, geoN*geoN)
	got = make([]float64, len(px))
	ruler = make([]float64, len(px))
	rng := rand.New(rand.NewPCG(32, 32))
	pool := &genPool{}
	n := geoAt
	for k := 0; k < n; k++ {
		atm, err := newAtmosphere(rng, turb, geoN, geoDx, ext, true, pool)
		if err != nil {
			t.Fatal(err)
		}
		atm.Phase(a, tm, 0, 0)
		sx, sy := [4]float64{1, 0, -1, 0}[k%4], [4]float64{0, 1, 0, -1}[k%4]
		for i, p := range px {
			th := float64(p) * geoDx / 2000
			atm.Phase(b, tm, sx*th, sy*th)
			got[i] += meanSqDiff(a, b) / float64(n)
			ruler[i] += sfAxis(a, geoN, int(math.Round(h*th/geoDx)), sy != 0) / float64(n)
		}
	}
	return got, ruler
}
