package compare

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"sync"
	"testing"

	"pdwave/infer"
	"pdwave/infer/restore"
	"pdwave/model/burst"
	"pdwave/model/fft"
	"pdwave/model/instrument"
	"pdwave/model/pd"
	"pdwave/model/site"
	"pdwave/simulate"
	"pdwave/weights"
)

// TestFlagFieldStudy is the calibration study of the learned-patch flag on
// the patches of simulated anisoplanatic fields, run only with
// PDWAVE_FLAG_FIELDS=N (N fields of 192² px, 16 frames, of the demo site
// over the scene mix, D/r0 drawn in [3, 7]; seeds from PDWAVE_FLAG_SEED,
// default 1: the calibration set is seed 1, the fresh set seed 2). For
// every patch of restore's grid it prints one CSV line: the errors (Noll
// 2–21, fraction of the true variance; truth at the patch centre) of the
// learned, 2- and 5-step polished and fully fitted wavefronts, their
// objectives, and the candidate statistics restore can compute without the
// full fit (restore's own metric ratio and coefficient rms at the learned
// estimate, the prior chi², the learned restoration's contrast over the
// raw contrast). It ends with the rates of the shipped flag
// (infer.LearnedSuspect) on the set.
func TestFlagFieldStudy(t *testing.T) {
	nf, _ := strconv.Atoi(os.Getenv("PDWAVE_FLAG_FIELDS"))
	if nf <= 0 {
		t.Skip("set PDWAVE_FLAG_FIELDS=N to run the field flag calibration study")
	}
	seed := uint64(1)
	if s := os.Getenv("PDWAVE_FLAG_SEED"); s != "" {
		v, err := strconv.ParseUint(s, 10, 64)
		if err != nil {
			t.Fatalf("PDWAVE_FLAG_SEED=%q: %v", s, err)
		}
		seed = v
	}
	fs := newFlagStudy(t)
	fmt.Println("set,field,patch,scene,d_over_r0," + flagStudyColumns)
	var rows []flagRow
	for f := 0; f < nf; f++ {
		rs, err := fs.field(seed, f)
		if err != nil {
			t.Fatalf("field %d: %v", f, err)
		}
		rows = append(rows, rs...)
	}
	bad, good, fb, fg := flagRates(rows)
	fmt.Printf("# seed %d: %d patches; flagged %d of %d with learned error > 2× the fit's, %d of %d within 1.2×\n", seed, len(rows), fb, bad, fg, good)
}

// flagStudy holds what every field of the study shares.
type flagStudy struct {
	sim     *simulate.Simulator
	scene   simulate.Scene
	cfg     infer.Config
	full    *infer.Fitter
	polish  [2]*infer.Fitter // 2 and 5 iterations
	est     *infer.NetEstimator
	setup   *restore.FieldSetup
	diam    float64
	workers int
}

// newFlagStudy builds the simulator (demo site, 16 frames), the scene mix,
// the fit configuration with the shipped weights, the fitters and
// restore's field setup for the learned estimate without polish.
func newFlagStudy(t *testing.T) *flagStudy {
	st, err := site.Load("../../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	model, err := weights.Default()
	if err != nil {
		t.Fatal(err)
	}
	cfg, used, note, err := infer.ConfigWithWeights(instrument.Sources{Site: st.Instrument()}, 16, model, false)
	if err != nil || !used {
		t.Fatal(err, note)
	}
	fs := &flagStudy{cfg: cfg, workers: 2}
	if fs.full, err = infer.NewFitter(cfg); err != nil {
		t.Fatal(err)
	}
	for i, k := range []int{2, 5} {
		pc := cfg
		pc.Stop = infer.Stop{Iterations: k}
		pc.Chi2Limit, pc.ExactEdges = 0, 0 // restore's polish: the periodic metric's few steps
		if fs.polish[i], err = infer.NewFitter(pc); err != nil {
			t.Fatal(err)
		}
	}
	if fs.est, err = infer.NewNetEstimator(model, fs.full.Basis()); err != nil {
		t.Fatal(err)
	}
	if fs.setup, err = restore.NewFieldSetup(cfg, restore.Method{Start: fs.est, Name: "learned"}); err != nil {
		t.Fatal(err)
	}
	scfg, _, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		t.Fatal(err)
	}
	scfg.Frames = 16
	if fs.sim, err = simulate.New(scfg); err != nil {
		t.Fatal(err)
	}
	dir, err := simulate.FindSceneDir()
	if err != nil {
		t.Fatal(err)
	}
	imgs, err := simulate.LoadSceneDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	fs.scene = simulate.SceneMix(simulate.GranulationParams{}, imgs)
	fs.diam = scfg.Telescope.Diameter
	return fs
}

// flagRow is one patch of the study.
type flagRow struct {
	errL, errP2, errP5, errF float64 // Noll 2–21 error fractions
	eL, eP2, eP5, eF         float64 // objectives
	mratio, crms             float64 // restore's figures at the learned estimate
	share, rawc              float64 // restore's signal share and the raw contrast at the learned estimate
	chi2, contrast           float64 // prior chi² of the learned estimate; its contrast / raw contrast
	flagged                  bool    // infer.LearnedSuspect fired
}

// flagStudyColumns names the CSV fields of flagRow.csv.
const flagStudyColumns = "err_learned,err_polish2,err_polish5,err_fit,e_learned,e_polish2,e_polish5,e_fit,metric_ratio,coeff_rms,chi2_learned,contrast_ratio,signal_share,raw_contrast,flagged"

func (r flagRow) csv() string {
	return fmt.Sprintf("%.5g,%.5g,%.5g,%.5g,%.6g,%.6g,%.6g,%.6g,%.5g,%.4g,%.4g,%.4g,%.4g,%.4g,%v",
		r.errL, r.errP2, r.errP5, r.errF, r.eL, r.eP2, r.eP5, r.eF, r.mratio, r.crms, r.chi2, r.contrast, r.share, r.rawc, r.flagged)
}

// field simulates field f of the set seed and scores every patch of
// restore's grid, printing one line per patch.
func (fs *flagStudy) field(seed uint64, f int) ([]flagRow, error) {
	rng := rand.New(rand.NewPCG(0xf1a9+seed, uint64(f)))
	dr0 := 3 + 4*rng.Float64()
	res, err := fs.sim.Field(rng, 192, 192, simulate.Options{R0: fs.diam / dr0, Source: fs.scene, Workers: fs.workers})
	if err != nil {
		return nil, err
	}
	n := fs.cfg.Patch
	g, err := infer.NewGrid(192, 192, n, infer.DefaultOverlap(n))
	if err != nil {
		return nil, err
	}
	rows := make([]flagRow, g.Count())
	errs := make([]error, g.Count())
	var wg sync.WaitGroup
	ch := make(chan int)
	for range fs.workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			eng, err := fs.setup.NewEngine()
			plan := fft.NewPlan(n, n)
			for id := range ch {
				if err != nil {
					errs[id] = err
					continue
				}
				x, y := g.Origin(id)
				tr := fs.sim.TruthAt(res, float64(x+n/2), float64(y+n/2))
				rows[id], errs[id] = fs.patch(res.Burst.Patch(x, y, n), tr, eng, plan)
			}
		}()
	}
	for id := range rows {
		ch <- id
	}
	close(ch)
	wg.Wait()
	for id, r := range rows {
		if errs[id] != nil {
			return nil, fmt.Errorf("patch %d: %w", id, errs[id])
		}
		fmt.Printf("%d,%d,%d,%q,%.3f,%s\n", seed, f, id, res.Scene, dr0, r.csv())
	}
	return rows, nil
}

// patch scores one patch: the learned estimate, its polishes, the full fit
// from zero, and restore's figures at the learned estimate.
func (fs *flagStudy) patch(data [][][]float64, tr *burst.Truth, eng restore.Engine, plan *fft.Plan) (flagRow, error) {
	var r flagRow
	cl, err := fs.est.Estimate(data)
	if err != nil {
		return r, err
	}
	p2, err := fs.polish[0].Fit(data, cl)
	if err != nil {
		return r, err
	}
	p5, err := fs.polish[1].Fit(data, cl)
	if err != nil {
		return r, err
	}
	ff, err := fs.full.Fit(data, nil)
	if err != nil {
		return r, err
	}
	r.eL, r.eP2, r.eP5, r.eF = p2.MetricStart, p2.MetricEnd, p5.MetricEnd, ff.MetricEnd
	for _, e := range []struct {
		dst  *float64
		noll [][]float64
	}{{&r.errL, p2.StartNoll}, {&r.errP2, p2.Noll}, {&r.errP5, p5.Noll}, {&r.errF, ff.Noll}} {
		if *e.dst, err = infer.ResidualFraction(e.noll, tr.Noll, 21); err != nil {
			return r, err
		}
	}
	n := fs.cfg.Patch
	pr := &restore.PatchResult{Tile: make([]float64, n*n), MetricRatio: math.NaN(), CoeffRMS: math.NaN()}
	if err := eng.Restore(pr, data); err != nil {
		return r, err
	}
	r.mratio, r.crms = pr.MetricRatio, pr.CoeffRMS
	r.share = pr.SignalShare
	r.chi2 = fs.full.PriorChi2(cl)
	img, err := fs.full.Restore(data, cl)
	if err != nil {
		return r, err
	}
	avg, level := apodisedAverage(data[0], pd.Window(n, fs.cfg.Metric.Window))
	sc := newScorer(n, level, plan)
	r.rawc = sc.contrast(avg)
	r.contrast = sc.contrast(img) / r.rawc
	r.flagged = infer.LearnedSuspect(r.share)
	return r, nil
}

// flagRates counts the patches whose learned error exceeds twice the
// fit's (bad) and those within 1.2× (good), and how many of each the
// shipped flag marked.
func flagRates(rows []flagRow) (bad, good, flaggedBad, flaggedGood int) {
	for _, r := range rows {
		switch {
		case r.errL > 2*r.errF:
			bad++
			if r.flagged {
				flaggedBad++
			}
		case r.errL <= 1.2*r.errF:
			good++
			if r.flagged {
				flaggedGood++
			}
		}
	}
	return bad, good, flaggedBad, flaggedGood
}
