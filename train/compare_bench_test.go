package train_test

import (
	"fmt"
	"math/rand/v2"
	"os"
	"slices"
	"testing"
	"time"

	"pdwave/infer"
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
//	learn-e10    learned error over Noll 2–10 as a fraction of the true variance
//	fit-e10      fitted error over Noll 2–10
//	learn-e21    learned error over Noll 2–21
//	fit-e21      fitted error over Noll 2–21
//	learn-ms     prediction time per burst (features + network), ms
//	fit-ms       fit time per burst, ms
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
	for b.Loop() {
		var eL, eF, l10, f10, l21, f21 float64
		var tL, tF time.Duration
		ratios := make([]float64, 0, n)
		for i := 0; i < n; i++ {
			res, err := sim.Patch(rand.New(rand.NewPCG(0xbe7c4, uint64(i))), simulate.Options{})
			if err != nil {
				b.Fatal(err)
			}
			bu := res.Burst
			data := [][][]float64{bu.Data[0], bu.Data[1]}
			t0 := time.Now()
			native, noll, err := est.Burst(bu.Data)
			if err != nil {
				b.Fatal(err)
			}
			tL += time.Since(t0)
			t0 = time.Now()
			fr, err := fitter.Fit(data, nil)
			if err != nil {
				b.Fatal(err)
			}
			tF += time.Since(t0)
			el, _, err := fitter.Objective(data, native)
			if err != nil {
				b.Fatal(err)
			}
			ef, _, err := fitter.Objective(data, fr.Coeffs)
			if err != nil {
				b.Fatal(err)
			}
			eL += el
			eF += ef
			ratios = append(ratios, el/ef)
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
		b.ReportMetric(l10, "learn-e10")
		b.ReportMetric(f10, "fit-e10")
		b.ReportMetric(l21, "learn-e21")
		b.ReportMetric(f21, "fit-e21")
		b.ReportMetric(float64(tL.Microseconds())/1e3/float64(n), "learn-ms")
		b.ReportMetric(float64(tF.Microseconds())/1e3/float64(n), "fit-ms")
	}
}
