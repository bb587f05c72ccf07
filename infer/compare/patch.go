package compare

import (
	"context"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat"

	"pdwave/infer"
	"pdwave/infer/patchrun"
	"pdwave/infer/restore"
	"pdwave/model/burst"
	"pdwave/model/fft"
)

// patchOut is the work result of one patch.
type patchOut struct {
	patch   Patch
	spectra [][]float64 // raw, then per method (no truth)
	err     error
}

// patchWork holds what every patch of a run shares: the estimate's stages
// (learned, polish, fit, as restore makes them), the methods to score and
// the metric's window. It is read-only during the parallel part.
type patchWork struct {
	chain   patchrun.Chain // Learned nil: no learned or polished estimate
	fitter  *infer.Fitter  // the full fit, also scoring every method
	methods []string
	win     []float64 // n×n apodisation of the metric's data
	// ref is the diffraction-limited true object over the field
	// (infer.DiffractionLimited; refNx columns), nil when unknown.
	ref   []float64
	refNx int
	// suspect is restore's setup for the learned estimate without polish,
	// whose engine gives the figure of infer.LearnedSuspect; nil without a
	// learned estimator.
	suspect *restore.FieldSetup
}

// imageError scores a restored patch at (x, y) against the reference
// (infer.ScoreImage over the central half: the window is flat there);
// nil without a reference or when the score is undefined.
func (w *patchWork) imageError(img []float64, x, y, n int) *float64 {
	if w.ref == nil {
		return nil
	}
	cut := make([]float64, n*n)
	for r := 0; r < n; r++ {
		copy(cut[r*n:r*n+n], w.ref[(y+r)*w.refNx+x:])
	}
	sc, err := infer.ScoreImage(img, cut, n, n, n/4, max(1, n/16))
	if err != nil {
		return nil
	}
	return &sc.Error
}

// runAll computes every patch of the grid on workers goroutines
// (patchrun.Runner, restore's loop), each with its own FFT plan, and
// returns the results in patch order.
func (w *patchWork) runAll(b *burst.Burst, g *infer.Grid, truths [][][]float64, workers int) []patchOut {
	n := g.Patch
	outs := make([]patchOut, g.Count())
	rn := patchrun.Runner[*patchWorker, patchOut]{
		Grid:      g,
		Workers:   workers,
		NewWorker: func() (*patchWorker, error) { return w.newWorker(n), nil },
		Work: func(_ context.Context, pw *patchWorker, p patchrun.Patch) (patchOut, bool) {
			return w.run(b.Patch(p.X0, p.Y0, n), p, truths[p.ID], pw), true
		},
		Done: func(p patchrun.Patch, out patchOut) error { outs[p.ID] = out; return nil },
	}
	rn.Run(context.Background(), 0, g.Count()) // cannot fail: no error from NewWorker or Done
	return outs
}

// patchWorker is one goroutine's state in runAll: its FFT plan and, with a
// learned estimator, restore's engine for the learned-suspect figure.
type patchWorker struct {
	plan   *fft.Plan
	eng    *restore.PatchEngine
	engErr error
}

// newWorker returns a worker's state for n×n patches.
func (w *patchWork) newWorker(n int) *patchWorker {
	pw := &patchWorker{plan: fft.NewPlan(n, n)}
	if w.suspect != nil {
		pw.eng = w.suspect.NewPatchEngine()
	}
	return pw
}

// learnedFigures returns restore's metric over its noise-only expectation
// at the learned estimate raw (as the estimator returned it) and the
// patch's signal share (the figure of infer.LearnedSuspect), computed by
// restore's own engine; each nil when the engine fails or the figure is
// unknown.
func learnedFigures(eng *restore.PatchEngine, data [][][]float64, raw [][]float64, n int) (overNoise, share *float64) {
	pr := &restore.PatchResult{Tile: make([]float64, n*n), Metric: math.NaN(), MetricRatio: math.NaN(), CoeffRMS: math.NaN(), SignalShare: math.NaN()}
	if err := eng.RestoreWith(pr, data, raw); err != nil {
		return nil, nil
	}
	finite := func(v float64) *float64 {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil
		}
		return &v
	}
	return finite(pr.MetricRatio), finite(pr.SignalShare)
}

// run computes every estimate of one patch (patchrun.Chain) and scores
// each method: the metric, the restored image's contrast and its power
// spectrum, beside the raw frame average's, and with a learned estimate
// restore's learned-suspect figure.
func (w *patchWork) run(data [][][]float64, p patchrun.Patch, truth [][]float64, pw *patchWorker) patchOut {
	out := patchOut{patch: Patch{Index: p.ID, X: p.X0, Y: p.Y0}}
	est, err := w.chain.Estimate(data)
	if err != nil {
		out.err = err
		return out
	}
	ests := estimatesOf(est, truth)
	n := w.fitter.Config().Patch
	avg, level := apodisedAverage(data[0], w.win)
	sc := newScorer(n, level, pw.plan)
	out.patch.RawContrast = sc.contrast(avg)
	out.patch.RawImageError = w.imageError(avg, p.X0, p.Y0, n)
	out.spectra = append(out.spectra, sc.spectrum(avg))
	for _, m := range w.methods {
		e := ests[m]
		met, _, err := w.fitter.Objective(data, e.Coeffs)
		if err != nil {
			out.err = fmt.Errorf("%s metric: %w", m, err)
			return out
		}
		e.Metric = met
		img, err := w.fitter.Restore(data, e.Coeffs)
		if err != nil {
			out.err = fmt.Errorf("%s restoration: %w", m, err)
			return out
		}
		e.Contrast = sc.contrast(img)
		e.ImageError = w.imageError(img, p.X0, p.Y0, n)
		if m != Truth {
			out.spectra = append(out.spectra, sc.spectrum(img))
		}
		out.patch.Estimates = append(out.patch.Estimates, *e)
	}
	if pw.engErr != nil {
		out.err = pw.engErr
	} else if pw.eng != nil {
		out.patch.LearnedOverNoise, out.patch.SignalShare = learnedFigures(pw.eng, data, est.Raw, n)
	}
	return out
}

// estimatesOf returns the report's estimates of the chain's stages (the
// learned one constrained, the fit's Total including the stages it
// continued) and, with a non-nil truth, the Truth estimate. Metrics and
// contrasts are left for the caller.
func estimatesOf(est *patchrun.Estimates, truth [][]float64) map[string]*Estimate {
	ests := map[string]*Estimate{}
	for _, st := range []struct {
		method string
		s      *patchrun.Stage
	}{{Learned, est.Learned}, {Polished, est.Polished}, {Fitted, est.Fitted}} {
		if st.s != nil {
			ests[st.method] = &Estimate{Method: st.method, Coeffs: st.s.Coeffs, Seconds: st.s.Seconds, Total: st.s.Total, Iterations: st.s.Iterations}
		}
	}
	if truth != nil {
		ests[Truth] = &Estimate{Method: Truth, Coeffs: truth}
	}
	return ests
}

// apodisedAverage returns the average of the frames of one channel,
// apodised like the metric's data: win·(avg − level) + level, where level
// is the window-weighted mean of the average, also returned.
func apodisedAverage(frames [][]float64, win []float64) (avg []float64, level float64) {
	avg = make([]float64, len(win))
	for _, im := range frames {
		for i, v := range im {
			avg[i] += v
		}
	}
	var sw, swd float64
	for i := range avg {
		avg[i] /= float64(len(frames))
		sw += win[i]
		swd += win[i] * avg[i]
	}
	level = swd / sw
	for i := range avg {
		avg[i] = win[i]*(avg[i]-level) + level
	}
	return avg, level
}

// scorer measures images of one patch relative to the raw mean level:
// the RMS contrast and the azimuthally averaged power spectrum, both
// normalised by that level (by 1 if the level is not positive).
type scorer struct {
	n    int
	norm float64
	plan *fft.Plan
	spec []float64    // n/2+1 spectrum bins
	zbuf []complex128 // n×n FFT output
	pbuf []float64    // n×n FFT input, then power
}

// newScorer returns a scorer for n×n images with raw mean level level,
// using plan for the FFTs.
func newScorer(n int, level float64, plan *fft.Plan) *scorer {
	norm := level
	if !(norm > 0) {
		norm = 1
	}
	return &scorer{n: n, norm: norm, plan: plan, spec: make([]float64, n/2+1),
		zbuf: make([]complex128, n*n), pbuf: make([]float64, n*n)}
}

// contrast returns the population standard deviation of img over the
// mean level.
func (s *scorer) contrast(img []float64) float64 {
	return stat.PopStdDev(img, nil) / s.norm
}

// spectrum returns a new slice with the azimuthal average of the power
// spectrum of img minus its least-squares plane, |FFT|²/(n² level²). The
// plane goes because a restoration carries the scene's mean plane
// un-apodised (pd.Objective.Restore with Detrend): its periodic continuation
// is a sawtooth whose spectrum, falling only as 1/f², would fill the
// frequencies beyond the noise filter's cut with power no method chose.
func (s *scorer) spectrum(img []float64) []float64 {
	n := s.n
	mu := stat.Mean(img, nil)
	c := float64(n-1) / 2
	var sxv, syv, sxx float64
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			v := img[y*n+x] - mu
			sxv += (float64(x) - c) * v
			syv += (float64(y) - c) * v
			sxx += (float64(x) - c) * (float64(x) - c)
		}
	}
	bx, by := sxv/sxx, syv/sxx // the centred x and y grids are orthogonal with equal norms
	for i, v := range img {
		s.pbuf[i] = v - mu - bx*(float64(i%n)-c) - by*(float64(i/n)-c)
	}
	s.plan.ForwardReal(s.zbuf, s.pbuf)
	scale := 1 / (float64(n*n) * s.norm * s.norm)
	for i, z := range s.zbuf {
		s.pbuf[i] = (real(z)*real(z) + imag(z)*imag(z)) * scale
	}
	AzimuthalAverage(s.spec, s.pbuf, n)
	return append([]float64(nil), s.spec...)
}
