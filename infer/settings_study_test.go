package infer

import (
	"fmt"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"

	"pdwave/simulate"
)

// envF returns the environment variable k as a number, else d.
func envF(k string, d float64) float64 {
	if s := os.Getenv(k); s != "" {
		v, err := strconv.ParseFloat(s, 64)
		if err == nil {
			return v
		}
	}
	return d
}

// TestSettingsStudy is the study the fit's defaults were chosen with
// (infer.DefaultConfig's documentation), run only with
// PDWAVE_SETTINGS_STUDY=1: the reference case on the demo site over the
// scenes of SCENES (default "granulation,real"), with the settings
// overridden from the environment — PRIOR, WINDOW, THR (noise threshold),
// GAMMA, MODES, CHI2, ITER, HP (high-pass fraction), NOFILTER, NODETREND;
// the case by DR0, PATCH; the simulator by OVERSAMPLE, PHOT; BURSTS (6),
// SEED (1). It prints one line per scene (medians, largest, mean).
func TestSettingsStudy(t *testing.T) {
	if os.Getenv("PDWAVE_SETTINGS_STUDY") == "" {
		t.Skip("set PDWAVE_SETTINGS_STUDY=1 to run the settings study")
	}
	sel := os.Getenv("SCENES")
	if sel == "" {
		sel = "granulation,real"
	}
	_, scenes, cfg := demoStudySetup(t, sel, 0, func(c *simulate.Config) {
		c.Oversample = int(envF("OVERSAMPLE", 0))
		c.Camera.Photons = envF("PHOT", c.Camera.Photons)
	})
	cfg.Prior = envF("PRIOR", cfg.Prior)
	cfg.Metric.PriorWeight = cfg.Prior
	cfg.Metric.Window = envF("WINDOW", cfg.Metric.Window)
	cfg.Metric.NoiseThreshold = envF("THR", cfg.Metric.NoiseThreshold)
	cfg.Metric.Gamma = envF("GAMMA", cfg.Metric.Gamma)
	cfg.Modes = int(envF("MODES", float64(cfg.Modes)))
	cfg.Chi2Limit = envF("CHI2", cfg.Chi2Limit)
	cfg.Stop.Iterations = int(envF("ITER", float64(cfg.Stop.Iterations)))
	if os.Getenv("NOFILTER") != "" {
		cfg.Metric.NoiseFilter = false
	}
	if os.Getenv("NODETREND") != "" {
		cfg.Metric.Detrend = false
	}
	cfg.Metric.HighPass = envF("HP", cfg.Metric.HighPass)
	cases := []StudyCase{StudyReference}
	if d := envF("DR0", 0); d > 0 {
		cases[0].DOverR0 = d
	}
	if v := int(envF("PATCH", 0)); v > 0 {
		cases[0].Patch = v
	}
	n := int(envF("BURSTS", 6))
	rows, err := StudyScenes(cfg, cases, n, scenes, uint64(envF("SEED", 1)), 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rows {
		fmt.Printf("ROW %-12s med10 %.3f med21 %.3f max21 %.3f mean21 %.3f  %.2fs it %.0f\n", r.Scene, r.Err10Median, r.Err21Median, r.Err21Max, r.Err21, r.Seconds, r.Iterations)
	}
}

// TestFromTruthStudy, run only with PDWAVE_TRUTH_STUDY=SCENE (e.g. brick):
// BURSTS (8) reference-case bursts over the scene fitted from zero and from
// the truth (projected on the basis), printing both objectives and errors:
// a fit from the truth that ends at the same objective with the same error
// means model error, not convergence, limits the scene.
func TestFromTruthStudy(t *testing.T) {
	sel := os.Getenv("PDWAVE_TRUTH_STUDY")
	if sel == "" {
		t.Skip("set PDWAVE_TRUTH_STUDY=SCENE to run the from-truth study")
	}
	_, scenes, cfg := demoStudySetup(t, sel, 16, nil)
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	bs := f.Basis()
	for b := 0; b < int(envF("BURSTS", 8)); b++ {
		rng := rand.New(rand.NewPCG(1, uint64(b)))
		data, truth, err := scenes[0].Source(StudyReference, rng)
		if err != nil {
			t.Fatal(err)
		}
		start := make([][]float64, cfg.Frames)
		for j := range start {
			start[j] = make([]float64, bs.Count)
			for k := 0; k < bs.Count; k++ {
				for i := 0; i < bs.Count && i < len(truth[j]); i++ {
					start[j][k] += bs.ToNoll.At(i, k) * truth[j][i]
				}
			}
		}
		r0, err := f.Fit(data, nil)
		if err != nil {
			t.Fatal(err)
		}
		rt, err := f.Fit(data, start)
		if err != nil {
			t.Fatal(err)
		}
		e0, _ := ResidualFraction(r0.Noll, truth, 21)
		et, _ := ResidualFraction(rt.Noll, truth, 21)
		fmt.Printf("B%d zero: E %.4g err %.3f | truth: E %.4g -> %.4g err %.3f\n", b, r0.MetricEnd, e0, rt.MetricStart, rt.MetricEnd, et)
	}
}

// TestFreshHighPassStudy, run only with PDWAVE_FRESH_STUDY=1: the bursts
// of TestFlagStudy (scene mix and granulation, D/r0 drawn in 3–7, seed 7,
// BURSTS per set, default 30) fitted with and without the high-pass (the
// fit configured at D/r0 = 5); PERBURST=1 prints every mix burst.
func TestFreshHighPassStudy(t *testing.T) {
	if os.Getenv("PDWAVE_FRESH_STUDY") == "" {
		t.Skip("set PDWAVE_FRESH_STUDY=1 to run the fresh-burst high-pass study")
	}
	_, scenes, cfg := demoStudySetup(t, "mix,granulation", 16, nil)
	n := int(envF("BURSTS", 30))
	for _, hp := range []float64{0, 1.0 / 16} {
		c := cfg
		c.Metric.HighPass = hp
		f, err := NewFitter(c)
		if err != nil {
			t.Fatal(err)
		}
		for si, sc := range scenes {
			var e10, e21 []float64
			for b := 0; b < n; b++ {
				rng := rand.New(rand.NewPCG(1000+7, uint64(si)<<20|uint64(b)))
				cs := StudyCase{DOverR0: 3 + 4*rng.Float64(), Patch: 64, Frames: 16, DiversityPV: 1}
				data, truth, err := sc.Source(cs, rng)
				if err != nil {
					t.Fatal(err)
				}
				r, err := f.Fit(data, nil)
				if err != nil {
					continue
				}
				a, _ := ResidualFraction(r.Noll, truth, 10)
				bb, _ := ResidualFraction(r.Noll, truth, 21)
				e10 = append(e10, a)
				e21 = append(e21, bb)
				if os.Getenv("PERBURST") != "" && si == 0 {
					fmt.Printf("PB %d hp %.3f dr0 %.2f e21 %.3f\n", b, hp, cs.DOverR0, bb)
				}
			}
			_, m10, _, _, _ := spread(e10)
			_, m21, _, _, _ := spread(e21)
			fmt.Printf("FRESH hp %.4f %-12s med10 %.3f med21 %.3f\n", hp, sc.Name, m10, m21)
		}
	}
}
