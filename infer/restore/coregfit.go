package restore

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"time"

	"pdwave/infer"
)

// Coreg says how Prepare finds the offset of the defocused channel.
type Coreg struct {
	// Fixed is a known offset (pixels), used as given; nil = measure it.
	Fixed *Offset
	// Fit is the restoration's fit configuration (telescope, diversity,
	// patch, frames, basis, prior). With it the offset is fitted inside
	// the phase-diversity fit of a few patches (FitOffset). Without it
	// (nil) the burst means are cross-correlated (MeasureShift), which the
	// different blur of the two channels biases by up to about 1 px.
	Fit *infer.Config
	// Patch is the side (pixels) of the patches fitted for the offset (0 =
	// CoregPatch of Fit.Patch).
	Patch int
	// Iterations caps the L-BFGS iterations of each patch fit (0 =
	// CoregIterations).
	Iterations int
}

// Coregistration is the offset Prepare found and how.
type Coregistration struct {
	Offset // defocused relative to focused channel, pixels
	// Method names how the offset was obtained, for the outputs: "given",
	// "fit median of 9 patches", "cross-correlation of burst means".
	Method string
	// Patches are the fitted offsets of the patches that entered the
	// median (FitOffset only), in patch order.
	Patches []Offset
	// Spread is the median absolute deviation of Patches from the median
	// along each axis (pixels; zero without a fit).
	Spread Offset
	// Elapsed is the time taken to find the offset.
	Elapsed time.Duration
}

// CoregIterations is the default cap on the L-BFGS iterations of each
// patch fit of FitOffset. Measured on simulated 192 px fields of the demo
// site (16 frames, 96 px patches): with 21 KL modes at D/r0 = 3 the median
// offset moves by at most 0.03 px between 40 iterations and 200; with the
// site's 36 modes at D/r0 ≈ 2.5–4.7 by up to 0.07 px, yet the error over
// four bursts was no smaller with 80 iterations (rms 0.11 px against
// 0.12 px) at twice the time.
const CoregIterations = 40

// CoregPatch returns the default side of the patches FitOffset fits for a
// restoration with patches of side patch: 1.5 times larger (patch +
// 2·(patch/4), so 64 → 96). Light from outside the patch that the defocused
// PSF spreads into it is model error that moves the fitted offset; measured
// on six simulated 192 px bursts (as for CoregIterations, offsets 0 and
// (0.6, −0.35) px), the rms error of the median offset was 0.13 px with
// 64 px patches (9 of them), 0.08 px with 96 px (4) and 0.08 px with one
// 128 px patch.
func CoregPatch(patch int) int { return patch + 2*(patch/4) }

// coregPerAxis is the largest number of patches along each axis that
// FitOffset fits (a 3×3 grid at most).
const coregPerAxis = 3

// CoregOrigins returns the origins along one axis of length n of the patches
// (side patch) that FitOffset fits: min(3, n/patch) disjoint patches spread
// evenly from 0 to n−patch (one centred patch if n < 2·patch). It returns nil if
// n < patch.
func CoregOrigins(n, patch int) []int {
	if patch < 1 || n < patch {
		return nil
	}
	k := min(coregPerAxis, n/patch)
	if k == 1 {
		return []int{(n - patch) / 2}
	}
	o := make([]int, k)
	for i := range o {
		o[i] = (i*(n-patch) + (k-1)/2) / (k - 1)
	}
	return o
}

// FitOffset measures the offset of the defocused channel of f (not yet
// moved) relative to the focused one: it fits up to 9 patches of side patch
// (0 = CoregPatch(cfg.Patch), or cfg.Patch if the field is smaller) spread
// over the field (CoregOrigins along each axis) with the phase-diversity fit
// of cfg (its patch side replaced) and the channel offset free
// (Metric.FitChannelOffset, one image shift of channel 2 common to all
// frames), each from zero with at most iterations L-BFGS iterations (0 =
// CoregIterations), and returns the median of the fitted offsets along each
// axis. Patches whose fit fails or whose correction the fit's guard rejects
// (its offset is then reset to zero) are left out; it is an error if none
// remains. cfg.Frames must equal the field's frames. The fits run on up to
// workers goroutines (0 = all cores); the result does not depend on their
// number.
//
// Accuracy: a single patch misses the true offset by 0.1–0.4 px, as model
// error (wavefront beyond the modes, light from outside the patch) moves
// the optimum; the median over the patches of ten simulated 192 px bursts
// of the demo site (16 frames, D/r0 = 2.5–4.7, four 96 px patches each)
// missed by 0.01–0.17 px, rms 0.10 px. What remains is common to the
// patches of a burst (they share the frames' seeing), so more patches help
// little.
func FitOffset(f *Field, cfg infer.Config, patch, iterations, workers int) (Coregistration, error) {
	t0 := time.Now()
	if cfg.Frames != f.Frames {
		return Coregistration{}, fmt.Errorf("restore: offset fit configured for %d frames, the burst has %d", cfg.Frames, f.Frames)
	}
	if patch <= 0 {
		patch = CoregPatch(cfg.Patch)
		if patch > min(f.Nx, f.Ny) {
			patch = cfg.Patch
		}
	}
	cfg.Patch = patch
	xs, ys := CoregOrigins(f.Nx, cfg.Patch), CoregOrigins(f.Ny, cfg.Patch)
	if xs == nil || ys == nil {
		return Coregistration{}, fmt.Errorf("restore: field %d×%d is smaller than one %d px patch", f.Nx, f.Ny, cfg.Patch)
	}
	if iterations <= 0 {
		iterations = CoregIterations
	}
	cfg.Metric.FitChannelOffset = true
	cfg.Stop.Iterations = iterations
	// The periodic metric only: with the exact-edge refinement the offset
	// fits of small test fields (32 px patches) were rejected by the guard
	// as implausible, and each worker's extended-support buffers (~15 MB
	// at 64 px) broke restore's memory bound; not yet measured for the
	// offset's accuracy.
	cfg.ExactEdges = 0
	fit, err := infer.NewFitter(cfg)
	if err != nil {
		return Coregistration{}, fmt.Errorf("restore: offset fit: %w", err)
	}
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	n := len(xs) * len(ys)
	offs := make([]Offset, n)
	errs := make([]error, n)
	infer.ForEach(n, workers, func() [][][]float64 { return newPatchBuffers(f.Frames, cfg.Patch) },
		func(buf [][][]float64, i int) {
			offs[i], errs[i] = coregFitPatch(fit, f, buf, cfg.Patch, xs[i%len(xs)], ys[i/len(xs)])
		})
	return coregSummarise(offs, errs, time.Since(t0))
}

// coregFitPatch cuts the side×side patch at (x0, y0) of f into buf and fits it,
// returning the fitted channel offset; a panic inside the fit becomes an
// error, as does a fit whose correction the guard rejected.
func coregFitPatch(fit *infer.Fitter, f *Field, buf [][][]float64, side, x0, y0 int) (off Offset, err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("patch at (%d, %d): panic: %v", x0, y0, p)
		}
	}()
	f.cut(buf, x0, y0, side)
	res, err := fit.Fit(buf, nil)
	if err != nil {
		return Offset{}, fmt.Errorf("patch at (%d, %d): %w", x0, y0, err)
	}
	if res.Flags&infer.FlagRejected != 0 {
		return Offset{}, fmt.Errorf("patch at (%d, %d): fit rejected as implausible", x0, y0)
	}
	return Offset{res.ChannelOffset[0], res.ChannelOffset[1]}, nil
}

// coregSummarise takes the per-axis median of the offsets whose error is
// nil.
func coregSummarise(offs []Offset, errs []error, elapsed time.Duration) (Coregistration, error) {
	var good []Offset
	var bad []error
	for i, e := range errs {
		if e != nil {
			bad = append(bad, e)
			continue
		}
		good = append(good, offs[i])
	}
	if len(good) == 0 {
		return Coregistration{}, fmt.Errorf("restore: offset fit failed in all %d patches: %w", len(offs), errors.Join(bad...))
	}
	dx, dy := make([]float64, len(good)), make([]float64, len(good))
	for i, o := range good {
		dx[i], dy[i] = o.DX, o.DY
	}
	c := Coregistration{Offset: Offset{coregMedian(dx), coregMedian(dy)}, Patches: good, Elapsed: elapsed,
		Method: fmt.Sprintf("fit median of %d patches", len(good))}
	if len(bad) > 0 {
		c.Method += fmt.Sprintf(" (%d failed)", len(bad))
	}
	for i := range good {
		dx[i] = math.Abs(good[i].DX - c.DX)
		dy[i] = math.Abs(good[i].DY - c.DY)
	}
	c.Spread = Offset{coregMedian(dx), coregMedian(dy)}
	return c, nil
}

// coregMedian returns the median of x (the mean of the middle two for an
// even count; gonum's stat.Quantile gives the lower one), reordering x.
func coregMedian(x []float64) float64 {
	sort.Float64s(x)
	n := len(x)
	if n%2 == 1 {
		return x[n/2]
	}
	return 0.5 * (x[n/2-1] + x[n/2])
}
