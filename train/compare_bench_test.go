package train_test

import (
	"fmt"
	"math/rand/v2"
	"os"
	"slices"
	"testing"
	"time"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/simulate"
	"pdwave/train"
	"pdwave/weights"
)

// BenchmarkLearnedVsFitted scores the weights (built-in, or the file named
// by PDWAVE_WEIGHTS) against the classical fit (infer.Fitter with its
// default settings, from zero) on demo bursts simulated at the site's median
// seeing: both estimates are evaluated with the fitter's objective and
// against the truth. It runs in an external test package so that train
// itself does not import infer. Reported per run of PDWAVE_BURSTS bursts
// (default 8):
//
//	ratio        mean learned objective / mean fitted objective (≥ 1 expected)
//	within1.5    fraction of bursts whose learned objective is ≤ 1.5× the fitted one
//	ratio-med    median over bursts of learned objective / fitted objective
//	ratio-p90    90th percentile of that ratio (≤ 1.5 is the target)
//	truth-ratio  mean objective at the true coefficients / mean fitted objective
//	truth-med    median over bursts of that ratio; truth-p90 its 90th percentile
//	learn-e10    learned error over Noll 2–10 as a fraction of the true variance
//	fit-e10      fitted error over Noll 2–10
//	learn-e21    learned error over Noll 2–21
//	fit-e21      fitted error over Noll 2–21
//	learn-ms     prediction time per burst (features + network), ms
//	fit-ms       fit time per burst, ms
//	speed-up     fit time / prediction time (≥ 300 is the target)
//
// Run with: go test ./train -run X -bench LearnedVsFitted -benchtime 1x
func BenchmarkLearnedVsFitted(b *testing.B) {
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		b.Fatal(err)
	}
	var m *net.Model
	if p := os.Getenv("PDWAVE_WEIGHTS"); p != "" {
		m, err = net.Load(p)
	} else {
		m, err = weights.Default()
	}
	if err != nil {
		b.Fatal(err)
	}
	setup, sc, err := train.FromSite(st, m.Arch.Modes, "")
	if err != nil {
		b.Fatal(err)
	}
	sim, err := simulate.New(sc)
	if err != nil {
		b.Fatal(err)
	}
	cfg := infer.DefaultConfig()
	cfg.Telescope = setup.Telescope
	cfg.DiversityPV = []float64{0, setup.DiversityPV}
	cfg.Patch, cfg.Frames, cfg.Modes, cfg.Basis = setup.Patch, setup.Frames, setup.Modes, setup.Basis
	cfg.DOverR0 = setup.Telescope.Diameter / setup.R0
	fitter, err := infer.NewFitter(cfg)
	if err != nil {
		b.Fatal(err)
	}
	est, err := net.NewEstimator(m)
	if err != nil {
		b.Fatal(err)
	}
	n := 8
	if s := os.Getenv("PDWAVE_BURSTS"); s != "" {
		if _, err := fmt.Sscan(s, &n); err != nil {
			b.Fatal(err)
		}
	}
	// All bursts are simulated first; then the predictions run back to back,
	// then the fits, so that each method is timed in its steady state (as in
	// a restoration) rather than with caches emptied by the other.
	bursts := make([]*burst.Burst, n)
	for i := range bursts {
		res, err := sim.Patch(rand.New(rand.NewPCG(0xbe7c4, uint64(i))), simulate.Options{})
		if err != nil {
			b.Fatal(err)
		}
		bursts[i] = res.Burst
	}
	for b.Loop() {
		learned := make([][2][][]float64, n) // native, Noll
		fits := make([]*infer.Result, n)
		t0 := time.Now()
		for i, bu := range bursts {
			native, noll, err := est.Burst(bu.Data)
			if err != nil {
				b.Fatal(err)
			}
			learned[i] = [2][][]float64{native, noll}
		}
		tL := time.Since(t0)
		t0 = time.Now()
		for i, bu := range bursts {
			fr, err := fitter.Fit([][][]float64{bu.Data[0], bu.Data[1]}, nil)
			if err != nil {
				b.Fatal(err)
			}
			fits[i] = fr
		}
		tF := time.Since(t0)
		var eL, eF, eT, l10, f10, l21, f21 float64
		ratios := make([]float64, 0, n)
		truthRatios := make([]float64, 0, n)
		for i, bu := range bursts {
			data := [][][]float64{bu.Data[0], bu.Data[1]}
			native, noll, fr := learned[i][0], learned[i][1], fits[i]
			el, _, err := fitter.Objective(data, native)
			if err != nil {
				b.Fatal(err)
			}
			ef, _, err := fitter.Objective(data, fr.Coeffs)
			if err != nil {
				b.Fatal(err)
			}
			et, _, err := fitter.Objective(data, bu.Truth.Coeffs)
			if err != nil {
				b.Fatal(err)
			}
			eL += el
			eF += ef
			eT += et
			ratios = append(ratios, el/ef)
			truthRatios = append(truthRatios, et/ef)
			for _, c := range []struct {
				est [][]float64
				j   int
				acc *float64
			}{{noll, 10, &l10}, {fr.Noll, 10, &f10}, {noll, 21, &l21}, {fr.Noll, 21, &f21}} {
				r, err := infer.ResidualFraction(c.est, bu.Truth.Noll, c.j)
				if err != nil {
					b.Fatal(err)
				}
				*c.acc += r / float64(n)
			}
		}
		b.ReportMetric(eL/eF, "ratio")
		slices.Sort(ratios)
		within := 0
		for _, r := range ratios {
			if r <= 1.5 {
				within++
			}
		}
		b.ReportMetric(float64(within)/float64(n), "within1.5")
		b.ReportMetric(ratios[n/2], "ratio-med")
		b.ReportMetric(ratios[(9*n)/10], "ratio-p90")
		slices.Sort(truthRatios)
		b.ReportMetric(eT/eF, "truth-ratio")
		b.ReportMetric(truthRatios[n/2], "truth-med")
		b.ReportMetric(truthRatios[(9*n)/10], "truth-p90")
		b.ReportMetric(l10, "learn-e10")
		b.ReportMetric(f10, "fit-e10")
		b.ReportMetric(l21, "learn-e21")
		b.ReportMetric(f21, "fit-e21")
		b.ReportMetric(float64(tL.Microseconds())/1e3/float64(n), "learn-ms")
		b.ReportMetric(float64(tF.Microseconds())/1e3/float64(n), "fit-ms")
		b.ReportMetric(float64(tF)/float64(tL), "speed-up")
	}
}
