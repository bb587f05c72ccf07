package infer

import (
	"math"
	"math/rand/v2"
	"testing"

	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/optics"
	"pdwave/simulate"
)

// TestNetEstimatorBasisConversion: a network predicts in the clear-aperture
// basis its weights were made for; for a fitter whose basis was built for
// the obscured pupil and a finite outer scale (modes.NewFor), the estimator
// converts the prediction, so the Noll-equivalent coefficients — the
// wavefront — are the same whichever basis receives them (both bases span
// Noll j = 2…Count+1). Without the conversion the Noll coefficients differ
// by the change of basis (the control).
func TestNetEstimatorBasisConversion(t *testing.T) {
	tel := demoTelescope()
	const n, frames, count = 64, 4, 21
	pup, err := optics.NewPupil(tel, n)
	if err != nil {
		t.Fatal(err)
	}
	clear, err := modes.New(modes.KindKL, count, n, pup.Radius)
	if err != nil {
		t.Fatal(err)
	}
	obsc, err := modes.NewFor(modes.KindKL, count, n, pup.Radius, modes.Aperture{Obscuration: tel.Obscuration, OuterScale: 60})
	if err != nil {
		t.Fatal(err)
	}
	scale := make([]float64, count)
	for i := range scale {
		scale[i] = 0.5
	}
	m, err := net.New(net.DefaultArch(count), net.Meta{Basis: "kl", Modes: count, Patch: n, Frames: frames,
		Diameter: tel.Diameter, Obscuration: tel.Obscuration, Wavelength: tel.Wavelength, PixelScale: tel.PixelScale, DiversityPV: 1}, scale, 3)
	if err != nil {
		t.Fatal(err)
	}
	data := [][][]float64{make([][]float64, frames), make([][]float64, frames)}
	rng := rand.New(rand.NewPCG(1, 2))
	for c := range data {
		for j := range data[c] {
			im := make([]float64, n*n)
			if err := simulate.Granulation(im, n, n, 0.12, simulate.GranulationParams{}, rng); err != nil {
				t.Fatal(err)
			}
			data[c][j] = im
		}
	}
	noll := func(b *modes.Basis) [][]float64 {
		e, err := NewNetEstimator(m, b)
		if err != nil {
			t.Fatal(err)
		}
		c, err := e.Estimate(data)
		if err != nil {
			t.Fatal(err)
		}
		out := make([][]float64, frames)
		for j := range c {
			out[j] = make([]float64, count)
			b.NollEquivalent(out[j], c[j])
		}
		return out
	}
	a, b := noll(clear), noll(obsc)
	var worst, size float64
	for j := range a {
		for i := range a[j] {
			worst = math.Max(worst, math.Abs(a[j][i]-b[j][i]))
			size = math.Max(size, math.Abs(a[j][i]))
		}
	}
	if !(size > 0) || worst > 1e-9*size {
		t.Errorf("Noll coefficients differ by %.3g (largest %.3g) between the clear and the obscured basis", worst, size)
	}
	// Control: the raw prediction read in the obscured basis.
	e, _ := NewNetEstimator(m, clear)
	c, _ := e.Estimate(data)
	var diff float64
	for j := range c {
		v := make([]float64, count)
		obsc.NollEquivalent(v, c[j])
		for i := range v {
			diff = math.Max(diff, math.Abs(v[i]-a[j][i]))
		}
	}
	if diff < 1e-3*size {
		t.Errorf("control: the two bases agree without conversion (%.3g): the test cannot fail", diff)
	}
	t.Logf("largest Noll coefficient %.3g; after conversion the bases agree to %.2g, without it they differ by %.3g", size, worst, diff)
}
