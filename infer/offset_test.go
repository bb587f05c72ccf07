package infer

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"gonum.org/v1/gonum/stat"

	"pdwave/simulate"
)

// TestFitChannelOffset: the fixed misregistration of the second camera,
// fitted as a differential tip/tilt common to all frames
// (Metric.FitChannelOffset, the fit's defaults otherwise), is recovered
// for no offset and for a known (0.7, −0.4) px offset made by the
// simulator as a real camera makes it (simulate.Options.ChannelOffset: a
// tilt on the imaging pupil, scene from outside the patch entering; 2×
// pupil sampling and 2N PSF support, beyond the fit's model). Six demo
// bursts (16 frames, 36 modes, D/r0 = 5, 10⁴ photons) over the scene mix
// (granulation and the shipped real images); the per-axis median must lie
// within 0.15 px of the truth.
//
// Measured with the periodic metric alone (TestOffsetStudy, 8 bursts,
// seeds 1–3): single bursts missed by 0.13–0.34 px rms, the median of 8 by
// 0.05–0.13 px, the model error of the apodised metric (w·(o⊗s) ≠ (w·o)⊗s
// over the taper; 0.10 px even at D/r0 = 0.05 and 10⁸ photons). With the
// default fit's exact-edge refinement (2026-12-03): single bursts 0.094 px
// rms and the median of 8 0.06 px (seed 1); 0.045 px rms at D/r0 = 0.05
// and 10⁸ photons; here the medians miss by 0.070 and 0.071 px. The
// accuracy issue asks for 0.05 px. The camera's offset is a constant of the
// instrument: measure it over many patches and bursts. Planted: the x tilt
// sign flipped in the fit's ramp (pd) → error 1.4 px, fails; the
// simulated offset dropped → 0.8 px.
func TestFitChannelOffset(t *testing.T) {
	sim, mix, cfg := offsetSetup(t, 5, nil)
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	for _, off := range [][2]float64{{0, 0}, {0.7, -0.4}} {
		var ox, oy []float64
		for i := uint64(0); i < 6; i++ {
			r, err := sim.Patch(rand.New(rand.NewPCG(1, i)), simulate.Options{Source: mix, ChannelOffset: off})
			if err != nil {
				t.Fatal(err)
			}
			res, err := f.Fit([][][]float64{r.Burst.Data[0], r.Burst.Data[1]}, nil)
			if err != nil {
				t.Fatal(err)
			}
			ox = append(ox, res.ChannelOffset[0])
			oy = append(oy, res.ChannelOffset[1])
		}
		mx, my := medianOf(ox), medianOf(oy)
		e := math.Hypot(mx-off[0], my-off[1])
		t.Logf("true offset (%.2f, %.2f) px: fitted x %.3f, y %.3f; median (%.3f, %.3f), error %.3f px", off[0], off[1], ox, oy, mx, my, e)
		if e > 0.15 {
			t.Errorf("true offset (%.2f, %.2f) px: median fitted (%.3f, %.3f), error %.3f px > 0.15", off[0], off[1], mx, my, e)
		}
	}
}

// medianOf returns the median of x (gonum's empirical quantile: the lower
// middle value for an even length).
func medianOf(x []float64) float64 {
	y := append([]float64(nil), x...)
	sort.Float64s(y)
	return stat.Quantile(0.5, stat.Empirical, y, nil)
}

// offsetSetup returns the demo simulator at D/r0 = dr0 (adjust, if not
// nil, changes its configuration first), the scene mix over the shipped
// images and the fit configuration for its bursts with the channel offset
// fitted.
func offsetSetup(t *testing.T, dr0 float64, adjust func(*simulate.Config)) (*simulate.Simulator, simulate.Scene, Config) {
	t.Helper()
	_, scfg := demoSite(t)
	scfg.Turbulence.R0 = scfg.Telescope.Diameter / dr0
	if adjust != nil {
		adjust(&scfg)
	}
	sim, err := simulate.New(scfg)
	if err != nil {
		t.Fatal(err)
	}
	images, err := shippedImages()
	if err != nil {
		t.Fatal(err)
	}
	_, _, cfg := demoStudySetup(t, "granulation", scfg.Frames, nil)
	cfg.DOverR0, cfg.Patch = dr0, scfg.Patch
	cfg.Metric.FitChannelOffset = true
	return sim, simulate.SceneMix(simulate.GranulationParams{}, images), cfg
}
