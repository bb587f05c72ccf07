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
// default settings, from zero) on PDWAVE_BURSTS (default 8) isoplanatic demo
// bursts simulated at the site's median seeing, the kind the network is
// trained on. Metrics: see scoreLearnedVsFitted. It runs in an external test
// package so that train itself does not import infer.
//
// Run with: go test ./train -run X -bench LearnedVsFitted -benchtime 1x
func BenchmarkLearnedVsFitted(b *testing.B) {
	_, sim, fitter, est := benchParts(b, 200)
	n := 8
	if s := os.Getenv("PDWAVE_BURSTS"); s != "" {
		if _, err := fmt.Sscan(s, &n); err != nil || n < 1 {
			b.Fatalf("PDWAVE_BURSTS=%q: want a positive count", s)
		}
	}
	cases := make([]benchCase, n)
	for i := range cases {
		res, err := sim.Patch(rand.New(rand.NewPCG(0xbe7c4, uint64(i))), simulate.Options{})
		if err != nil {
			b.Fatal(err)
		}
		cases[i] = benchCase{data: res.Burst.Data, truth: res.Burst.Truth}
	}
	scoreLearnedVsFitted(b, cases, fitter, est)
}

// BenchmarkLearnedVsFittedField is BenchmarkLearnedVsFitted on the patches
// of simulated fields instead of single isoplanatic bursts: PDWAVE_FIELDS
// (default 2) fields of 256 × 256 px at the site's median seeing (or at the
// D/r0 given by PDWAVE_DR0; the fitter's prior stays at the median; its
// iteration limit is PDWAVE_FIT_ITER, default 200), with anisoplanatism and
// a scene that runs across the patch edges, cut into 64 px patches without
// overlap (16 per field), as restore and compare cut real data. Each patch
// is fitted from zero, independently of the network; the truth is the
// wavefront at the patch centre (anisoplanatism makes it only an
// approximation of what the patch's PSF averages over).
//
// Run with: PDWAVE_FIELDS=6 go test ./train -run X -bench LearnedVsFittedField -benchtime 1x
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
		if _, err := fmt.Sscan(s, &fields); err != nil || fields < 1 {
			b.Fatalf("PDWAVE_FIELDS=%q: want a positive count", s)
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
	var cases []benchCase
	for f := 0; f < fields; f++ {
		res, err := sim.Field(rand.New(rand.NewPCG(0xf1e1d, uint64(f))), size, size, opt)
		if err != nil {
			b.Fatal(err)
		}
		for y0 := 0; y0+n <= size; y0 += n {
			for x0 := 0; x0+n <= size; x0 += n {
				d := res.Burst.Patch(x0, y0, n)
				cases = append(cases, benchCase{
					data:  [2][][]float64{d[0], d[1]},
					truth: sim.TruthAt(res, float64(x0)+float64(n)/2, float64(y0)+float64(n)/2),
				})
			}
		}
	}
	scoreLearnedVsFitted(b, cases, fitter, est)
}

// benchCase is one burst of a learned-vs-fitted benchmark with its truth.
type benchCase struct {
	data  [2][][]float64
	truth *burst.Truth
}

// scoreLearnedVsFitted predicts and fits every case (timed interleaved, see
// timeInterleaved), evaluates both estimates and the truth with the fitter's
// objective and against the truth, and reports per case:
//
//	patches      number of cases
//	ratio        mean learned objective / mean fitted objective (≥ 1 expected)
//	within1.5    fraction of cases whose learned objective is ≤ 1.5× the fitted one
//	ratio-med    median over cases of learned objective / fitted objective
//	ratio-p90    90th percentile of that ratio (≤ 1.5 is the target); ratio-max the largest
//	truth-ratio  mean objective at the true coefficients / mean fitted objective
//	truth-med    median over cases of that ratio; truth-p90 its 90th percentile
//	learn-e10    learned error over Noll 2–10 as a fraction of the true variance (mean over cases)
//	fit-e10      fitted error over Noll 2–10
//	learn-e21    learned error over Noll 2–21
//	fit-e21      fitted error over Noll 2–21
//	learn-ms     prediction time per case (features + network), ms, over
//	             five passes interleaved with the fits
//	fit-ms       fit time per case, ms
//	speed-up     fit time / prediction time (≥ 300 is the target)
func scoreLearnedVsFitted(b *testing.B, cases []benchCase, fitter *infer.Fitter, est *net.Estimator) {
	n := len(cases)
	for b.Loop() {
		learned := make([][2][][]float64, n) // native, Noll
		fits := make([]*infer.Result, n)
		tL, tF := timeInterleaved(b, n, func(i int) {
			native, noll, err := est.Burst(cases[i].data)
			if err != nil {
				b.Fatal(err)
			}
			learned[i] = [2][][]float64{native, noll}
		}, func(i int) {
			fr, err := fitter.Fit(cases[i].data[:], nil)
			if err != nil {
				b.Fatal(err)
			}
			fits[i] = fr
		})
		var eL, eF, eT, l10, f10, l21, f21 float64
		ratios := make([]float64, 0, n)
		truthRatios := make([]float64, 0, n)
		for i, c := range cases {
			data := c.data[:]
			var e [3]float64
			for k, coeffs := range [][][]float64{learned[i][0], fits[i].Coeffs, c.truth.Coeffs} {
				v, _, err := fitter.Objective(data, coeffs)
				if err != nil {
					b.Fatal(err)
				}
				e[k] = v
			}
			eL += e[0]
			eF += e[1]
			eT += e[2]
			ratios = append(ratios, e[0]/e[1])
			truthRatios = append(truthRatios, e[2]/e[1])
			for _, r := range []struct {
				est [][]float64
				j   int
				acc *float64
			}{{learned[i][1], 10, &l10}, {fits[i].Noll, 10, &f10}, {learned[i][1], 21, &l21}, {fits[i].Noll, 21, &f21}} {
				v, err := infer.ResidualFraction(r.est, c.truth.Noll, r.j)
				if err != nil {
					b.Fatal(err)
				}
				*r.acc += v / float64(n)
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
		b.ReportMetric(float64(n), "patches")
		b.ReportMetric(eL/eF, "ratio")
		b.ReportMetric(float64(within)/float64(n), "within1.5")
		b.ReportMetric(ratios[n/2], "ratio-med")
		b.ReportMetric(ratios[(9*n)/10], "ratio-p90")
		b.ReportMetric(ratios[n-1], "ratio-max")
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
	cfg.Diversity = slices.Clone(setup.Diversity)
	cfg.Patch, cfg.Frames, cfg.Modes, cfg.Basis = setup.Patch, setup.Frames, setup.Modes, setup.Basis
	cfg.DOverR0 = setup.DOverR0
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
