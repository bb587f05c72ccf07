package infer

import (
	"fmt"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"

	"pdwave/model/instrument"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/simulate"
	"pdwave/weights"
)

// TestFlagStudy is the calibration study of the learned-estimate quality
// flag, run only with PDWAVE_FLAG_STUDY=N (N bursts per scene set, seed
// from PDWAVE_FLAG_SEED, default 1). Over bursts of the demo site on the
// scene mix and on granulation, it records per burst the errors (Noll
// 2–21, fraction of the true variance) of the learned, 2-step and 5-step
// polished and fully fitted wavefronts, and the candidate statistics:
// objective ratios learned/polished and learned/fitted, and the prior chi²
// of the learned estimate. It writes one CSV line per burst to stdout.
func TestFlagStudy(t *testing.T) {
	n, _ := strconv.Atoi(os.Getenv("PDWAVE_FLAG_STUDY"))
	if n <= 0 {
		t.Skip("set PDWAVE_FLAG_STUDY=N to run the flag calibration study")
	}
	seed, _ := strconv.ParseUint(os.Getenv("PDWAVE_FLAG_SEED"), 10, 64)
	model, err := weights.Default()
	if err != nil {
		t.Fatal(err)
	}
	cfg, full, est, scenes := learnedStudySetup(t, model)
	polish := make([]*Fitter, len(flagStudyPolish))
	for i, k := range flagStudyPolish {
		pc := cfg
		pc.Stop = Stop{Iterations: k}
		pc.Chi2Limit = 0
		if polish[i], err = NewFitter(pc); err != nil {
			t.Fatal(err)
		}
	}
	fmt.Println(flagStudyHeader())
	for si, sc := range scenes {
		for b := 0; b < n; b++ {
			rng := rand.New(rand.NewPCG(1000+seed, uint64(si)<<20|uint64(b)))
			c := StudyCase{DOverR0: 3 + 4*rng.Float64(), Patch: 64, Frames: 16, DiversityPV: 1}
			data, truth, err := sc.Source(c, rng)
			if err != nil {
				t.Fatal(err)
			}
			line, err := flagStudyBurst(data, truth, est, full, polish)
			if err != nil {
				t.Logf("burst %d of %s: %v", b, sc.Name, err)
				continue
			}
			fmt.Printf("%s,%.3f,%s\n", sc.Name, c.DOverR0, line)
		}
	}
}

// flagStudyPolish are the polish budgets (L-BFGS iterations from the
// learned start) the study scores.
var flagStudyPolish = []int{2, 5, 10, 20, 50}

// flagStudyHeader is the CSV header of TestFlagStudy: errors of the
// learned estimate, each polish and the fit, then their objectives, then
// the learned estimate's prior chi².
func flagStudyHeader() string {
	h := "scene,d_over_r0"
	for _, what := range []string{"err", "e"} {
		h += "," + what + "_learned"
		for _, k := range flagStudyPolish {
			h += fmt.Sprintf(",%s_polish%d", what, k)
		}
		h += "," + what + "_fit"
	}
	return h + ",chi2_learned"
}

// flagStudyBurst returns the CSV fields of one burst of TestFlagStudy.
func flagStudyBurst(data [][][]float64, truth [][]float64, est *NetEstimator, full *Fitter, polish []*Fitter) (string, error) {
	cl, err := est.Estimate(data)
	if err != nil {
		return "", err
	}
	k := len(polish)
	errs, objs := make([]float64, k+2), make([]float64, k+2)
	for i, f := range append(append([]*Fitter{}, polish...), full) {
		start := cl
		if f == full {
			start = nil
		}
		r, err := f.Fit(data, start)
		if err != nil {
			return "", err
		}
		if i == 0 {
			objs[0] = r.MetricStart
			if errs[0], err = ResidualFraction(r.StartNoll, truth, 21); err != nil {
				return "", err
			}
		}
		objs[i+1] = r.MetricEnd
		if errs[i+1], err = ResidualFraction(r.Noll, truth, 21); err != nil {
			return "", err
		}
	}
	line := ""
	for _, v := range errs {
		line += fmt.Sprintf("%.5g,", v)
	}
	for _, v := range objs {
		line += fmt.Sprintf("%.6g,", v)
	}
	return line + fmt.Sprintf("%.4g", full.PriorChi2(cl)), nil
}

// learnedStudySetup returns for model on the demo site the fit
// configuration (16 frames), the full fitter, the learned estimator in its
// basis and the scene sets mix and granulation of the studies.
func learnedStudySetup(t *testing.T, model *net.Model) (Config, *Fitter, *NetEstimator, []StudyScene) {
	t.Helper()
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	cfg, used, note, err := ConfigWithWeights(instrument.Sources{Site: st.Instrument()}, 16, model, false)
	if err != nil || !used {
		t.Fatal(err, note)
	}
	full, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	est, err := NewNetEstimator(model, full.Basis())
	if err != nil {
		t.Fatal(err)
	}
	scfg, _, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		t.Fatal(err)
	}
	scenes, err := SimulatedStudyScenes(scfg, "mix,granulation", shippedImages)
	if err != nil {
		t.Fatal(err)
	}
	return cfg, full, est, scenes
}
