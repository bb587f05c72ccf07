package net

import (
	"math"
	"slices"
	"strings"
	"testing"

	"pdwave/model/modes"
	"pdwave/model/optics"
)

// The estimator's native and Noll coefficients describe the same wavefront
// and carry no burst-mean tip/tilt.
func TestEstimatorRemovesMeanTilt(t *testing.T) {
	scale := make([]float64, 10)
	for i := range scale {
		scale[i] = 1
	}
	m, err := New(DefaultArch(10), demoMeta(), scale, 3)
	if err != nil {
		t.Fatal(err)
	}
	// Bias the output so the raw prediction has a clear mean tilt.
	last := m.Params[len(m.Params)-1].Data
	for i := range last {
		last[i] = 0.3 * float64(i+1)
	}
	e, err := NewEstimator(m)
	if err != nil {
		t.Fatal(err)
	}
	const frames = 4
	native, noll, err := e.Burst(randomBurst(frames, 64, 5))
	if err != nil {
		t.Fatal(err)
	}
	var mean [2]float64
	eq := make([]float64, 10)
	for j := 0; j < frames; j++ {
		e.Basis().NollEquivalent(eq, native[j])
		for k := range eq {
			if math.Abs(eq[k]-noll[j][k]) > 1e-12 {
				t.Fatalf("frame %d Noll %d: from native %g, returned %g", j, k+2, eq[k], noll[j][k])
			}
		}
		mean[0] += noll[j][0]
		mean[1] += noll[j][1]
	}
	if math.Abs(mean[0]) > 1e-12 || math.Abs(mean[1]) > 1e-12 {
		t.Fatalf("burst-mean tip/tilt %g, %g left", mean[0]/frames, mean[1]/frames)
	}
	if m.Meta.Basis != "kl" {
		t.Fatal("test expects a KL model")
	}
}

// The estimator's basis is the clear-aperture basis of the weights' optics
// (modes.New on the pupil of optics.NewPupil for the metadata's telescope,
// the construction the weights were trained with), also for metadata
// without a diversity; metadata without a wavelength are refused.
// Planted: instrument.RealAperture in NewEstimator fails the mode
// comparison (the annular KL modes differ).
func TestEstimatorBasis(t *testing.T) {
	scale := make([]float64, 10)
	for i := range scale {
		scale[i] = 1
	}
	md := demoMeta()
	md.DiversityPV = 0
	m, err := New(DefaultArch(10), md, scale, 3)
	if err != nil {
		t.Fatal(err)
	}
	e, err := NewEstimator(m)
	if err != nil {
		t.Fatal(err)
	}
	tel := optics.Telescope{Diameter: md.Diameter, Obscuration: md.Obscuration, Wavelength: md.Wavelength, PixelScale: md.PixelScale}
	pu, err := optics.NewPupil(tel, md.Patch)
	if err != nil {
		t.Fatal(err)
	}
	want, err := modes.New(modes.KindKL, 10, md.Patch, pu.Radius)
	if err != nil {
		t.Fatal(err)
	}
	got := e.Basis()
	if got.Count != want.Count || got.N != want.N || got.Radius != want.Radius {
		t.Fatalf("basis %d modes on %d px (radius %g), want %d on %d (radius %g)", got.Count, got.N, got.Radius, want.Count, want.N, want.Radius)
	}
	for k := range want.Modes {
		if !slices.Equal(got.Modes[k], want.Modes[k]) {
			t.Fatalf("mode %d differs from the clear-aperture basis", k+1)
		}
	}
	m.Meta.Wavelength = 0
	if _, err := NewEstimator(m); err == nil || !strings.Contains(err.Error(), "wavelength") {
		t.Errorf("metadata without a wavelength: error %v, want one naming it", err)
	}
}

// The default Estimator (float32 forward pass, features handed over frame
// by frame) and NewEstimator64 (float64 reference) give the same
// coefficients on the shipped weights to far below their error: < 1e-4 rad
// rms (native and Noll), over frame counts 1, 7 and 16. Its hot path
// allocates nothing after the first burst of a frame count.
func TestEstimator32MatchesEstimator64(t *testing.T) {
	m, err := Load("../../weights/demo.safetensors")
	if err != nil {
		t.Fatal(err)
	}
	e32, err := NewEstimator(m)
	if err != nil {
		t.Fatal(err)
	}
	e64, err := NewEstimator64(m)
	if err != nil {
		t.Fatal(err)
	}
	for _, frames := range []int{16, 1, 7} {
		d := randomBurst(frames, m.Meta.Patch, uint64(30+frames))
		n32, l32, err := e32.Burst(d)
		if err != nil {
			t.Fatal(err)
		}
		n64, l64, err := e64.Burst(d)
		if err != nil {
			t.Fatal(err)
		}
		for name, pair := range map[string][2][][]float64{"native": {n32, n64}, "Noll": {l32, l64}} {
			var ss, mx float64
			cnt := 0
			for j := range pair[1] {
				for k, v := range pair[1][j] {
					dv := pair[0][j][k] - v
					ss += dv * dv
					mx = math.Max(mx, math.Abs(dv))
					cnt++
				}
			}
			rms := math.Sqrt(ss / float64(cnt))
			t.Logf("%d frames, %s: float32 − float64 rms %.2g rad, max %.2g rad", frames, name, rms, mx)
			if rms > 1e-4 {
				t.Errorf("%d frames, %s coefficients differ by %.3g rad rms, want < 1e-4", frames, name, rms)
			}
		}
	}
	d := randomBurst(4, m.Meta.Patch, 9)
	run := func() {
		if err := e32.predict(d); err != nil {
			t.Fatal(err)
		}
	}
	run()
	if n := testing.AllocsPerRun(5, run); n != 0 {
		t.Errorf("%v allocations per prediction", n)
	}
}
