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
//	learn-ms     prediction time per burst (features + network), ms, over
//	             five passes interleaved with the fits (see timeInterleaved)
//	fit-ms       fit time per burst, ms
//	speed-up     fit time / prediction time (≥ 300 is the target)
//
// Run with: go test ./train -run X -bench LearnedVsFitted -benchtime 1x
func BenchmarkLearnedVsFitted(b *testing.B) {
	_, sim, fitter, est := benchParts(b, 200)
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
		tL, tF := timeInterleaved(b, len(bursts), func(i int) {
			bu := bursts[i]
			native, noll, err := est.Burst(bu.Data)
			if err != nil {
				b.Fatal(err)
			}
			learned[i] = [2][][]float64{native, noll}
		}, func(i int) {
			bu := bursts[i]
			fr, err := fitter.Fit([][][]float64{bu.Data[0], bu.Data[1]}, nil)
			if err != nil {
				b.Fatal(err)
			}
			fits[i] = fr
		})
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
		b.ReportMetric(float64(tL.Microseconds())/1e3, "learn-ms")
		b.ReportMetric(float64(tF.Microseconds())/1e3, "fit-ms")
		b.ReportMetric(float64(tF)/float64(tL), "speed-up")
	}
}

// BenchmarkLearnedVsFittedField is BenchmarkLearnedVsFitted on the patches
// of simulated fields instead of single isoplanatic patches: PDWAVE_FIELDS
// (default 2) fields of 256 × 256 px at the site's median seeing, with
// anisoplanatism and a scene that runs across the patch edges, cut into
// 64 px patches without overlap (16 per field), as restore and compare cut
// real data. Each patch is fitted from zero, independently of the network;
// the truth is the wavefront at the patch centre. Same metrics as
// BenchmarkLearnedVsFitted, per patch.
func BenchmarkLearnedVsFittedField(b *testing.B) {
	iter := 200
	if s := os.Getenv("PDWAVE_FIT_ITER"); s != "" {
		if _, err := fmt.Sscan(s, &iter); err != nil || iter < 1 {
			b.Fatalf("PDWAVE_FIT_ITER=%q: want a positive iteration count", s)
		}
	}
	setup, sim, fitter, est := benchParts(b, iter)
	fields := 2
	if s := os.Getenv("PDWAVE_FIELDS"); s != "" {
		if _, err := fmt.Sscan(s, &fields); err != nil {
			b.Fatal(err)
		}
	}
	opt := simulate.Options{}
	if s := os.Getenv("PDWAVE_DR0"); s != "" {
		var dr0 float64
		if _, err := fmt.Sscan(s, &dr0); err != nil || !(dr0 > 0) {
			b.Fatalf("PDWAVE_DR0=%q: want D/r0 > 0", s)
		}
		opt.R0 = setup.Telescope.Diameter / dr0
	}
	const size = 256
	n := setup.Patch
	type patch struct {
		data  [2][][]float64
		truth *burst.Truth
	}
	var patches []patch
	for f := 0; f < fields; f++ {
		res, err := sim.Field(rand.New(rand.NewPCG(0xf1e1d, uint64(f))), size, size, opt)
		if err != nil {
			b.Fatal(err)
		}
		bu := res.Burst
		for y0 := 0; y0+n <= size; y0 += n {
			for x0 := 0; x0+n <= size; x0 += n {
				var p patch
				for c := 0; c < 2; c++ {
					for _, im := range bu.Data[c] {
						crop := make([]float64, n*n)
						for y := 0; y < n; y++ {
							copy(crop[y*n:(y+1)*n], im[(y0+y)*size+x0:(y0+y)*size+x0+n])
						}
						p.data[c] = append(p.data[c], crop)
					}
				}
				p.truth = sim.TruthAt(res, float64(x0)+float64(n)/2, float64(y0)+float64(n)/2)
				patches = append(patches, p)
			}
		}
	}
	np := len(patches)
	for b.Loop() {
		learned := make([][2][][]float64, np)
		fits := make([]*infer.Result, np)
		tL, tF := timeInterleaved(b, len(patches), func(i int) {
			p := patches[i]
			native, noll, err := est.Burst(p.data)
			if err != nil {
				b.Fatal(err)
			}
			learned[i] = [2][][]float64{native, noll}
		}, func(i int) {
			p := patches[i]
			fr, err := fitter.Fit([][][]float64{p.data[0], p.data[1]}, nil)
			if err != nil {
				b.Fatal(err)
			}
			fits[i] = fr
		})
		var l10, f10, l21, f21 float64
		ratios := make([]float64, 0, np)
		truthRatios := make([]float64, 0, np)
		for i, p := range patches {
			data := [][][]float64{p.data[0], p.data[1]}
			el, _, err := fitter.Objective(data, learned[i][0])
			if err != nil {
				b.Fatal(err)
			}
			ef, _, err := fitter.Objective(data, fits[i].Coeffs)
			if err != nil {
				b.Fatal(err)
			}
			et, _, err := fitter.Objective(data, p.truth.Coeffs)
			if err != nil {
				b.Fatal(err)
			}
			ratios = append(ratios, el/ef)
			truthRatios = append(truthRatios, et/ef)
			for _, c := range []struct {
				est [][]float64
				j   int
				acc *float64
			}{{learned[i][1], 10, &l10}, {fits[i].Noll, 10, &f10}, {learned[i][1], 21, &l21}, {fits[i].Noll, 21, &f21}} {
				r, err := infer.ResidualFraction(c.est, p.truth.Noll, c.j)
				if err != nil {
					b.Fatal(err)
				}
				*c.acc += r / float64(np)
			}
		}
		slices.Sort(ratios)
		slices.Sort(truthRatios)
		within := 0
		for _, r := range ratios {
			if r <= 1.5 {
				within++
			}
		}
		b.ReportMetric(float64(np), "patches")
		b.ReportMetric(float64(within)/float64(np), "within1.5")
		b.ReportMetric(ratios[np/2], "ratio-med")
		b.ReportMetric(ratios[(9*np)/10], "ratio-p90")
		b.ReportMetric(ratios[np-1], "ratio-max")
		b.ReportMetric(truthRatios[np/2], "truth-med")
		b.ReportMetric(l10, "learn-e10")
		b.ReportMetric(f10, "fit-e10")
		b.ReportMetric(l21, "learn-e21")
		b.ReportMetric(f21, "fit-e21")
		b.ReportMetric(float64(tL.Microseconds())/1e3, "learn-ms")
		b.ReportMetric(float64(tF.Microseconds())/1e3, "fit-ms")
		b.ReportMetric(float64(tF)/float64(tL), "speed-up")
	}
}

// timeInterleaved times predict(i) and fit(i) for i = 0..n−1 and returns
// the time per burst of each. The bursts are fitted in five chunks, and
// before each chunk all bursts are predicted once, back to back; the
// prediction time is the total over the five passes divided by 5n. Both
// methods so sample the same stretches of a shared machine's varying speed,
// and each runs in its steady state (a pass over all bursts reads them from
// main memory when they do not fit in the caches, as a restoration does).
func timeInterleaved(b *testing.B, n int, predict, fit func(i int)) (perPredict, perFit time.Duration) {
	const chunks = 5
	var tL, tF time.Duration
	for c := 0; c < chunks; c++ {
		t0 := time.Now()
		for i := 0; i < n; i++ {
			predict(i)
		}
		tL += time.Since(t0)
		t0 = time.Now()
		for i := c * n / chunks; i < (c+1)*n/chunks; i++ {
			fit(i)
		}
		tF += time.Since(t0)
	}
	return tL / time.Duration(chunks*n), tF / time.Duration(n)
}

// benchParts loads the demo site and the weights under test (PDWAVE_WEIGHTS,
// else the built-in ones) and returns the training setup, a simulator at
// the site's median seeing, the classical fitter with the defaults of
// "pdwave fit" (iteration limit iter) and the network estimator.
func benchParts(b *testing.B, iter int) (train.Setup, *simulate.Simulator, *infer.Fitter, *net.Estimator) {
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
	cfg.Stop.Iterations = iter
	fitter, err := infer.NewFitter(cfg)
	if err != nil {
		b.Fatal(err)
	}
	est, err := net.NewEstimator(m)
	if err != nil {
		b.Fatal(err)
	}
	return setup, sim, fitter, est
}
