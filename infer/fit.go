package infer

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"
	"time"

	"gonum.org/v1/gonum/optimize"

	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/optics"
	"pdwave/model/pd"
)

// Estimator gives wavefront coefficients for one patch. The classical fit
// (*Fitter) and a learned network implement it, so a restoration pipeline
// can take either.
//
// Estimate receives data[channel][frame] (N×N images, channel 0 focused,
// N and frame count as the estimator was built for) and returns frames ×
// Basis().Count native coefficients in rad. It must not modify data nor
// keep references to it, and must be safe for concurrent use.
type Estimator interface {
	Basis() *modes.Basis
	Estimate(data [][][]float64) ([][]float64, error)
}

// Stop tells the optimiser when to stop; whichever comes first. Zero
// fields are ignored, but at least one of Iterations or WallTime should be
// set.
type Stop struct {
	Iterations int           // maximum major (L-BFGS) iterations
	RelChange  float64       // stop when the objective improves by less than this fraction over 3 iterations
	WallTime   time.Duration // maximum run time per patch
}

// Config describes the fit shared by all patches of a burst.
type Config struct {
	// Instrument is the telescope, channels with their diversity, patch,
	// modes, basis and expected D/r0 (instrument.Resolve). The basis is
	// built for the instrument's own pupil and turbulence (modes.NewFor
	// with Instrument.Aperture); D/r0 sets the prior variances
	// σ_m² = Variance_m·(D/r0)^(5/3) and the optimiser's scaling.
	instrument.Instrument
	// Notes records where each instrument value came from (may be nil).
	Notes instrument.Notes
	// BasisFor chooses the aperture the basis is built for: the
	// instrument's real pupil (RealAperture, the zero value) or the
	// clear-aperture Kolmogorov basis the network's outputs are in
	// (ClearAperture, for fits that must share the network's basis).
	BasisFor instrument.BasisAperture
	Frames   int // frames per patch
	// Prior is the weight of the turbulence prior against the metric
	// normalised by the data power (pd.Settings.PriorWeight); 0 = none.
	Prior float64
	// Metric holds the remaining metric settings; its PriorWeight is
	// replaced by Prior and its HighPassSeeing by DOverR0.
	Metric pd.Settings
	Stop   Stop // when the optimiser stops
	// RegisterTilt starts fits from zero with the tip/tilt of each frame
	// measured by cross-correlating the frames of the least-defocused
	// channel (fits from given coefficients keep theirs).
	RegisterTilt bool
	// Chi2Limit is the guard against fits worse than no correction: a fit
	// whose PriorChi2 exceeds it is refitted with a stronger prior and, if
	// still above, dropped (see Result.Flags). 0 turns the guard off.
	Chi2Limit float64
	// Stages lists increasing numbers of free modes for a coarse-to-fine
	// fit (each stage starts where the previous ended; the final stage
	// frees all modes). Empty: one stage.
	Stages []int
	// ExactEdges is the number of L-BFGS iterations of a refinement on
	// the exact-edge objective (pd.Objective.SetExactEdges: the object on
	// a support larger than the patch and no window, so the light that
	// crosses the patch edge is no model error) after the Stop.Iterations
	// of the periodic metric; 0 = none. The guard then judges the refined
	// coefficients (refitting on the exact-edge objective).
	ExactEdges int
	// EdgeGate guards the exact-edge refinement: if it leaves a wavefront
	// whose prior chi² (PriorChi2: mean α²/σ²) exceeds 1, the prior's own
	// expectation, and EdgeGate times the chi² where the periodic
	// iterations ended, the refinement is undone, the periodic fit
	// continues for ExactEdges iterations instead, and FlagEdgesDropped is
	// set; an early look after edgeEarlyIteration refinement iterations
	// stops a refinement that is already going that way. 0 = no gate.
	//
	// Why: the exact-edge model holds one PSF per frame over the whole
	// patch and its margin. Where the PSF varies across the patch
	// (anisoplanatism: high layers and patches wider than the isoplanatic
	// angle) it fits wavefronts far worse than none, with coefficients far
	// beyond the turbulence's, while the periodic metric, weighted to the
	// window's centre, stays near the truth at the patch centre. Measured
	// 2026-12-04 (guard off), Noll 2–21 errors: on 12 patches of three
	// simulated 192² px granulation fields of the demo site (layers at 0,
	// 3 and 10 km; the patch is about four isoplanatic angles wide), D/r0
	// 3.6–6.8, the refinement left 0.71–4.2 against 0.10–0.37 for the
	// periodic fit, with chi² 2.8–9.4 against 0.08–0.59 (ratio 15–62); on
	// 32 isoplanatic bursts over brick and camera (D/r0 = 5) it helped on
	// every one (0.007–0.80 against 0.07–1.0), with chi² 0.31–1.03 (ratio
	// 1.5–4.2). The periodic objective's rise, tried first as the gate,
	// overlapped: 1.6–2.2 on the fields but up to 2.5 on camera bursts the
	// refinement fixed. 8 sits between the two ratio ranges (geometric
	// mean of 4.2 and 15). Not the patch edge: weighting the exact-edge
	// residuals with the window (taper 0.25) made the same field patches
	// worse (0.12–18).
	EdgeGate float64
}

// DefaultConfig returns the fit's defaults: 64 px patches, 16 frames, 36
// KL modes, D/r0 = 5, prior weight 0.001, window taper 0.25 with the plane
// removed (pd.Settings.Detrend), the metric on images high-passed with a
// Gaussian of 1/16 of the patch side, at least 0.4·λ/r0 for the
// configured D/r0 (pd.Settings.HighPass, HighPassSeeing), noise
// filter, tilt constraint, 1 wave of defocus in channel 1, 30 iterations
// or 1e-6 relative change on that metric followed by 150 iterations on the
// exact-edge objective under its gate (EdgeGate 8, against anisoplanatic
// patches), and the guard at PriorChi2 1.8. The telescope
// must still be filled in.
//
// Chosen on the scene mix, not on granulation alone: bursts of the demo
// site from the simulator forming images beyond the fit's model (pupil
// sampled 2× finer, PSF support 2N, pixel box, wavefront beyond the modes)
// over the granulation and the five real images of testdata/scenes, twelve
// bursts each at D/r0 = 5 (measured 2026-12-03). Median error over Noll
// 2–10 without the high-pass: granulation 0.029, gravel 0.042, grass
// 0.027, deepfield 0.16, camera 0.22, brick 0.19; with it (σ = 1/16 of
// the side): 0.026, 0.019, 0.023, 0.041, 0.071, 0.159. σ = 2, 3, 4, 5, 6,
// 8 px at 64 px: camera 0.17, 0.078, 0.072, 0.072, 0.081, 0.10; σ = 2 px
// was worse than none on grass and brick. At 128 px σ = 8 px (1/16)
// matched or beat 4 px on every scene tried. Weight 0.0003 or 0.003 with
// the high-pass: worse on camera (0.085, 0.077) and mixed elsewhere. A
// taper of 0.125 was worse on 5 of 6 scenes and Hann (0.5) on all 6;
// mean subtraction instead of the plane was worse on camera and deepfield;
// 500 iterations instead of 200 changed no median by more than 0.01; 55
// modes instead of 36 changed none by more than 0.01. Tried and not
// adopted: windows that follow each frame's registered image motion
// (brick 0.126, camera 0.067, granulation 0.035), and an empirical-Bayes
// prior weight re-estimated from the metric's excess over its noise-only
// expectation (three times that weight: brick 0.136, others within
// 0.005, at twice the cost). The seeing floor of the width, from
// 8 bursts per scene at D/r0 = 7 / 10 (median Noll 2–10, granulation and
// the five real scenes pooled): no high-pass 0.096, 0.19 / 0.31, 0.43;
// σ = 4 px 0.15, 0.18 / 0.40, 0.51; with the floor (σ = 5.8 / 8.2 px)
// 0.13, 0.15 / 0.34, 0.38. At D/r0 = 2 σ = 1.6 or 4 px were alike
// (granulation 0.019, real 0.025 / 0.024; none: 0.029, 0.083). The guard: fitted PriorChi2 was 0.2–0.95 on
// 35 of 36 bursts (previous defaults) and 2.1 on the one whose error
// exceeded the wavefront (4.7).
//
// The exact-edge refinement (ExactEdges, 2026-12-03; same simulator,
// demo site, D/r0 = 5, eight bursts per scene, median Noll 2–10 / 2–21):
// masking the scene to the window's flat centre took brick from 0.159 to
// 0.030 and camera from 0.074 to 0.030, so light crossing the patch edge,
// not the scene's directional spectrum, limited them. 200 periodic
// iterations then 50 exact: granulation 0.019, brick 0.086, camera 0.040;
// 100 + 100: 0.017, 0.066, 0.041; 30 + 100: granulation 0.017, brick
// 0.066, camera 0.046, deep field 0.021, grass 0.009, gravel 0.010;
// 30 + 150 (adopted): 0.014 / 0.026, 0.055 / 0.085, 0.043 / 0.075,
// 0.016, 0.007, 0.008, worst brick burst 0.50 over Noll 2–21 (periodic
// fit alone: 0.034, 0.158, 0.073, 0.041, 0.023, 0.023, worst 0.89). A
// deferred correction of the periodic metric's data by the exact model
// (four passes) stalled at brick 0.092; the ridge μ = 1e-3 / 1e-4 / 1e-5
// gave brick 0.066 / 0.073 / 0.074 and camera's worst burst 0.30 / 0.13 /
// 0.13 (1e-4 adopted).
func DefaultConfig() Config {
	return Config{
		Instrument: instrument.Instrument{
			Diversity: []float64{0, 1}, Patch: instrument.DefaultPatch, Modes: instrument.DefaultModes,
			Basis: instrument.DefaultBasis, DOverR0: instrument.DefaultDOverR0,
		},
		Frames:       16,
		Prior:        pd.DefaultSettings().PriorWeight,
		Metric:       pd.DefaultSettings(),
		Stop:         Stop{Iterations: 30, RelChange: 1e-6},
		ExactEdges:   150,
		EdgeGate:     8,
		RegisterTilt: true,
		Chi2Limit:    1.8,
	}
}

// Result is the outcome of fitting one patch.
type Result struct {
	Restored    []float64     // restored patch, N×N (object estimate with the noise filter)
	Coeffs      [][]float64   // frames × modes, native basis, rad; burst-mean tilt removed
	Noll        [][]float64   // frames × modes, Noll-equivalent (Noll j = 2 + index), rad
	StartNoll   [][]float64   // Noll-equivalent coefficients of the starting point (after tilt registration)
	MetricStart float64       // objective E at the start (normalised metric + prior)
	MetricEnd   float64       // objective E at the end (periodic metric, also after an exact-edge refinement)
	ExactEnd    float64       // exact-edge objective at the end (Config.ExactEdges; 0 without)
	DataStart   float64       // normalised metric L/P̄ alone, at the start
	DataEnd     float64       // normalised metric L/P̄ alone, at the end
	Iterations  int           // major iterations of L-BFGS
	Evaluations int           // value+gradient evaluations
	Elapsed     time.Duration // wall time of the fit
	Status      string        // why the optimiser stopped
	Chi2        float64       // PriorChi2 of Coeffs (0 when the guard is off)
	// ChannelOffset is the fitted image shift (x, y) of channel 2 relative
	// to channel 1, pixels, with Metric.FitChannelOffset (else zero).
	ChannelOffset [2]float64
	Flags         FitFlags // what the guard found and did
}

// FitFlags records what the fit's guard (Config.Chi2Limit) found.
type FitFlags uint8

// The guard's flags.
const (
	// FlagImplausible: the first fit's wavefront had PriorChi2 above the limit.
	FlagImplausible FitFlags = 1 << iota
	// FlagRefitted: the patch was fitted again with a ten times stronger prior.
	FlagRefitted
	// FlagRejected: the refit was still implausible; the correction was
	// dropped (zero coefficients but the registered tilts).
	FlagRejected
	// FlagEdgesDropped: the exact-edge refinement left an implausible
	// wavefront (Config.EdgeGate) and was undone; the periodic fit was
	// continued instead.
	FlagEdgesDropped
)

// String names the flags, "+"-separated ("" for none).
func (g FitFlags) String() string {
	var out []string
	for _, c := range []struct {
		f    FitFlags
		name string
	}{{FlagImplausible, "implausible"}, {FlagRefitted, "refitted"}, {FlagRejected, "rejected"}, {FlagEdgesDropped, "edges_dropped"}} {
		if g&c.f != 0 {
			out = append(out, c.name)
		}
	}
	return strings.Join(out, "+")
}

// refitPrior is the weakest prior weight of a guard refit (common practice
// to start an order of magnitude above the usual weights).
const refitPrior = 0.01

// Fitter fits patches for one Config. It is safe for concurrent use: each
// concurrent call takes its own pd.Objective from an internal pool (one
// Objective per goroutine; an Objective owns its FFT plan and buffers).
type Fitter struct {
	cfg    Config
	pupil  *optics.Pupil
	basis  *modes.Basis
	div    [][]float64
	sigma2 []float64 // prior variances
	chiVar []float64 // Kolmogorov variance of every mode (tilts too), for PriorChi2
	scale  []float64 // coefficient scale per mode, rad
	tiltX  []float64 // native coefficients per pixel of image motion
	tiltY  []float64
	refCh  int // least-defocused channel, for registration

	mu   sync.Mutex
	free []*worker
}

type worker struct {
	s      *pd.Objective
	x      []float64 // optimiser variables (scaled coefficients)
	alpha  []float64
	grad   []float64
	cacheX []float64
	cacheF float64
	cacheG []float64
	valid  bool
	evals  int
	active int // modes free in this stage (others held)
	reg    *registrar
}

// NewFitter checks cfg and prepares the pupil, basis and diversities. It
// returns an error on invalid settings (sampling coarser than Nyquist for
// the patch, no frames, …).
func NewFitter(cfg Config) (*Fitter, error) {
	if cfg.Frames < 1 {
		return nil, fmt.Errorf("fit: need at least one frame, got %d", cfg.Frames)
	}
	if cfg.Prior < 0 || math.IsNaN(cfg.Prior) {
		return nil, fmt.Errorf("fit: prior weight must be ≥ 0, got %g", cfg.Prior)
	}
	if cfg.Stop.Iterations <= 0 && cfg.Stop.WallTime <= 0 && cfg.Stop.RelChange <= 0 {
		return nil, errors.New("fit: no stopping rule (iterations, relative change or wall time)")
	}
	bt, err := instrument.Build(cfg.Instrument, cfg.BasisFor)
	if err != nil {
		return nil, fmt.Errorf("fit: %w", err)
	}
	f := &Fitter{cfg: cfg, pupil: bt.Pupil, basis: bt.Basis, div: bt.Diversity,
		chiVar: bt.Variance, scale: bt.Scale}
	f.cfg.Metric.PriorWeight = cfg.Prior
	f.cfg.Metric.HighPassSeeing = cfg.DOverR0
	f.tiltX, f.tiltY = tiltPerPixel(bt.Basis)
	for k, pv := range cfg.Diversity {
		if math.Abs(pv) < math.Abs(cfg.Diversity[f.refCh]) {
			f.refCh = k
		}
	}
	f.sigma2 = pd.KolmogorovPrior(bt.Basis, cfg.DOverR0)
	return f, nil
}

// Basis returns the fit's modal basis (drawn on the patch grid).
func (f *Fitter) Basis() *modes.Basis { return f.basis }

// Pupil returns the pupil on the patch grid.
func (f *Fitter) Pupil() *optics.Pupil { return f.pupil }

// Diversity returns the diversity phase maps of the channels (rad, N×N,
// optics.Pupil.Defocus of each channel's diversity; nil for a channel without
// diversity). The maps are the fitter's own: callers must not modify them.
func (f *Fitter) Diversity() [][]float64 { return f.div }

// Config returns the configuration (PriorWeight filled in).
func (f *Fitter) Config() Config { return f.cfg }

// PriorVariance returns the prior variance σ_m² of each native mode (rad²;
// +Inf for the loose tilt modes). The slice is shared; do not modify.
func (f *Fitter) PriorVariance() []float64 { return f.sigma2 }

func (f *Fitter) get() *worker {
	f.mu.Lock()
	if n := len(f.free); n > 0 {
		w := f.free[n-1]
		f.free = f.free[:n-1]
		f.mu.Unlock()
		return w
	}
	f.mu.Unlock()
	s := pd.NewObjective(f.pupil, f.basis, f.div, f.cfg.Frames, f.cfg.Metric)
	s.SetPrior(f.sigma2)
	nt := s.NumParams()
	win := f.cfg.Metric.Window
	if win <= 0 {
		win = 0.125
	}
	return &worker{
		reg: newRegistrar(f.cfg.Patch, f.cfg.Frames, win),
		s:   s, x: make([]float64, nt), alpha: make([]float64, nt), grad: make([]float64, nt),
		cacheX: make([]float64, nt), cacheG: make([]float64, nt),
	}
}

func (f *Fitter) put(w *worker) {
	f.mu.Lock()
	f.free = append(f.free, w)
	f.mu.Unlock()
}

// Estimate fits the patch from zero and returns the native coefficients
// (frames × modes, rad). It implements Estimator.
func (f *Fitter) Estimate(data [][][]float64) ([][]float64, error) {
	r, err := f.fit(data, nil, false)
	if err != nil {
		return nil, err
	}
	return r.Coeffs, nil
}

// Fit fits the patch data[channel][frame] starting from start (frames ×
// modes native coefficients, rad; nil = zero) and restores it. It returns
// an error on malformed data (wrong sizes, non-finite values, no signal).
func (f *Fitter) Fit(data [][][]float64, start [][]float64) (*Result, error) {
	return f.fit(data, start, true)
}

// Restore returns the restored patch (N×N) for given coefficients without
// fitting: the object estimate F̂ with the noise filter (pd.Objective.Restore).
func (f *Fitter) Restore(data [][][]float64, coeffs [][]float64) ([]float64, error) {
	w := f.get()
	defer f.put(w)
	if err := w.s.SetData(data); err != nil {
		return nil, fmt.Errorf("restore: %w", err)
	}
	if err := f.flatten(w.alpha, coeffs); err != nil {
		return nil, fmt.Errorf("restore: %w", err)
	}
	out := make([]float64, f.cfg.Patch*f.cfg.Patch)
	w.s.Restore(out, w.alpha)
	return out, nil
}

// Objective returns the objective E and the normalised metric L/P̄ of the
// patch for given coefficients (nil = zero), without fitting.
func (f *Fitter) Objective(data [][][]float64, coeffs [][]float64) (e, metric float64, err error) {
	w := f.get()
	defer f.put(w)
	if err := w.s.SetData(data); err != nil {
		return 0, 0, fmt.Errorf("objective: %w", err)
	}
	if err := f.flatten(w.alpha, coeffs); err != nil {
		return 0, 0, fmt.Errorf("objective: %w", err)
	}
	e = w.s.ValueGrad(nil, w.alpha)
	metric, _ = w.s.LastTerms()
	return e, metric, nil
}

func (f *Fitter) flatten(dst []float64, c [][]float64) error {
	m := f.basis.Count
	if c == nil {
		clear(dst)
		return nil
	}
	if len(c) != f.cfg.Frames {
		return fmt.Errorf("coefficients for %d frames, want %d", len(c), f.cfg.Frames)
	}
	clear(dst[f.cfg.Frames*m:]) // channel offsets start at zero
	for j, row := range c {
		if len(row) != m {
			return fmt.Errorf("frame %d has %d coefficients, want %d", j, len(row), m)
		}
		for k, v := range row {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("frame %d coefficient %d is %g", j, k, v)
			}
			dst[j*m+k] = v
		}
	}
	return nil
}

// eval computes value and gradient in the scaled variables x (α = scale·x),
// caching the last point: gonum asks for Func and Grad separately at the
// same x.
func (f *Fitter) eval(w *worker, x []float64) {
	if w.valid {
		same := true
		for i, v := range x {
			if v != w.cacheX[i] {
				same = false
				break
			}
		}
		if same {
			return
		}
	}
	m := f.basis.Count
	nc := f.cfg.Frames * m
	for i, v := range x {
		w.alpha[i] = v * f.scaleAt(i)
	}
	w.cacheF = w.s.ValueGrad(w.grad, w.alpha)
	for i, g := range w.grad {
		if i >= nc || i%m < w.active {
			w.cacheG[i] = g * f.scaleAt(i)
		} else {
			w.cacheG[i] = 0
		}
	}
	copy(w.cacheX, x)
	w.valid = true
	w.evals++
}

func (f *Fitter) fit(data [][][]float64, start [][]float64, restore bool) (*Result, error) {
	t0 := time.Now()
	w := f.get()
	defer f.put(w)
	if err := w.s.SetData(data); err != nil {
		return nil, fmt.Errorf("fit: %w", err)
	}
	if err := f.flatten(w.alpha, start); err != nil {
		return nil, fmt.Errorf("fit: start: %w", err)
	}
	if start == nil && f.cfg.RegisterTilt && f.cfg.Frames > 1 {
		m := f.basis.Count
		for j, s := range w.reg.shifts(data[f.refCh]) {
			for k := 0; k < m; k++ {
				w.alpha[j*m+k] += s[0]*f.tiltX[k] + s[1]*f.tiltY[k]
			}
		}
	}
	w.s.Constrain(w.alpha)
	res := &Result{StartNoll: f.nollRows(w.alpha)}
	x0 := make([]float64, len(w.alpha))
	m := f.basis.Count
	for i, a := range w.alpha {
		x0[i] = a / f.scaleAt(i)
	}
	w.evals = 0
	res.MetricStart = w.s.ValueGrad(nil, w.alpha)
	res.DataStart, _ = w.s.LastTerms()
	xBest := f.minimise(w, x0, res, f.cfg.Stop, nil)
	f.setAlpha(w, xBest)
	if err := f.refineEdges(w, data, res); err != nil {
		return nil, err
	}
	if lim := f.cfg.Chi2Limit; lim > 0 {
		f.guard(w, x0, res, lim)
	}
	if on, _ := w.s.ExactEdges(); on {
		res.ExactEnd = w.s.ValueGrad(nil, w.alpha)
		_ = w.s.SetExactEdges(nil)
	}
	res.MetricEnd = w.s.ValueGrad(nil, w.alpha)
	res.DataEnd, _ = w.s.LastTerms()
	res.Evaluations = w.evals
	res.Coeffs = make([][]float64, f.cfg.Frames)
	for j := range res.Coeffs {
		res.Coeffs[j] = append([]float64(nil), w.alpha[j*m:(j+1)*m]...)
	}
	res.Noll = f.nollRows(w.alpha)
	if f.cfg.Metric.FitChannelOffset {
		res.ChannelOffset[0], res.ChannelOffset[1] = w.s.ChannelOffset(w.alpha, 1)
	}
	if restore {
		res.Restored = make([]float64, f.cfg.Patch*f.cfg.Patch)
		w.s.Restore(res.Restored, w.alpha)
	}
	res.Elapsed = time.Since(t0)
	return res, nil
}

// minimise runs the optimisation stages from the scaled start x0 and
// returns the best scaled point; it records iterations and status in res.
// A non-nil watch is consulted at every major iteration (see edgeWatch).
func (f *Fitter) minimise(w *worker, x0 []float64, res *Result, st Stop, watch *edgeWatch) []float64 {
	prob := optimize.Problem{
		Func: func(x []float64) float64 { f.eval(w, x); return w.cacheF },
		Grad: func(g, x []float64) { f.eval(w, x); copy(g, w.cacheG) },
	}
	set := &optimize.Settings{
		MajorIterations: st.Iterations,
		Runtime:         st.WallTime,
		Converger:       optimize.NeverTerminate{},
	}
	if st.RelChange > 0 {
		set.Converger = &optimize.FunctionConverge{Relative: st.RelChange, Iterations: 3}
	}
	if watch != nil {
		watch.inner, set.Converger = set.Converger, watch
	}
	w.valid = false
	xBest := x0
	f.setAlpha(w, x0)
	fBest := w.s.ValueGrad(nil, w.alpha)
	status := "start"
	for _, act := range f.stages() {
		w.active = act
		w.valid = false
		or, err := optimize.Minimize(prob, xBest, set, &optimize.LBFGS{Store: 10})
		if or != nil {
			status = or.Status.String()
			res.Iterations += or.MajorIterations
			if or.F <= fBest && or.X != nil {
				xBest, fBest = or.X, or.F
			}
		}
		if err != nil {
			// Line-search failures near the optimum are not fatal: keep the best point.
			status = fmt.Sprintf("%s (%v)", status, err)
		}
	}
	res.Status = status
	return xBest
}

// refineEdges refines w.alpha on the exact-edge objective with
// Config.ExactEdges iterations, leaving that objective switched on. If the
// refined wavefront fails Config.EdgeGate (at the end, or already at the
// early look, edgeEarlyIteration), the refinement is undone: the exact-edge
// objective is switched off and the periodic fit continues from where it
// ended for as many iterations (FlagEdgesDropped).
func (f *Fitter) refineEdges(w *worker, data [][][]float64, res *Result) error {
	if f.cfg.ExactEdges <= 0 {
		return nil
	}
	chiPer := f.chi2Flat(w.alpha)
	x := make([]float64, len(w.alpha))
	for i, a := range w.alpha {
		x[i] = a / f.scaleAt(i)
	}
	if err := w.s.SetExactEdges(data); err != nil {
		return fmt.Errorf("fit: exact edges: %w", err)
	}
	st := f.cfg.Stop
	st.Iterations = f.cfg.ExactEdges
	var watch *edgeWatch
	g := f.cfg.EdgeGate
	if g > 0 {
		watch = &edgeWatch{at: edgeEarlyIteration, fail: func(xs []float64) bool {
			return edgeImplausible(f.chi2Scaled(w, xs), chiPer, edgeEarlyFloor, edgeEarlyFactor)
		}}
	}
	f.setAlpha(w, f.minimise(w, x, res, st, watch))
	if g > 0 && (watch.tripped || edgeImplausible(f.chi2Flat(w.alpha), chiPer, 1, g)) {
		res.Flags |= FlagEdgesDropped
		_ = w.s.SetExactEdges(nil)
		f.setAlpha(w, f.minimise(w, x, res, st, nil))
	}
	return nil
}

// The early look of the exact-edge gate: at edgeEarlyIteration the
// refinement stops (and is undone, FlagEdgesDropped) if its wavefront's
// prior chi² already exceeds edgeEarlyFloor and edgeEarlyFactor times the
// periodic fit's, so an anisoplanatic patch does not spend the whole
// refinement (about 0.75 s of one core) before the gate undoes it.
// Measured 2026-12-04 (the patches and bursts of Config.EdgeGate's note):
// after 50 exact-edge iterations that ratio was 1.1–2.5 on the 32
// isoplanatic bursts and 2.8–25 on the 12 field patches, 11 of which the
// look stopped; the twelfth was caught by the final gate. The floor, half
// the final gate's 1 because the refinement has not wandered far by then,
// is a choice, not a measurement.
const (
	edgeEarlyIteration = 50
	edgeEarlyFactor    = 4
	edgeEarlyFloor     = 0.5
)

// edgeWatch is an optimize.Converger that wraps inner and, at major
// iteration at, stops the run (MethodConverge, tripped set) if fail holds
// at the best point so far (scaled parameters).
type edgeWatch struct {
	inner   optimize.Converger
	at      int
	fail    func(x []float64) bool
	iter    int
	tripped bool
}

// Init implements optimize.Converger.
func (c *edgeWatch) Init(dim int) {
	c.iter, c.tripped = 0, false
	c.inner.Init(dim)
}

// Converged implements optimize.Converger.
func (c *edgeWatch) Converged(loc *optimize.Location) optimize.Status {
	c.iter++
	if c.iter == c.at && c.fail(loc.X) {
		c.tripped = true
		return optimize.MethodConverge
	}
	return c.inner.Converged(loc)
}

// chi2Scaled returns chi2Flat of the coefficients of the scaled point x
// with w's tilt constraint applied, leaving w.alpha alone.
func (f *Fitter) chi2Scaled(w *worker, x []float64) float64 {
	a := make([]float64, len(x))
	for i, v := range x {
		a[i] = v * f.scaleAt(i)
	}
	w.s.Constrain(a)
	return f.chi2Flat(a)
}

// edgeImplausible reports whether a refinement whose wavefront has prior
// chi² chiX, from a periodic fit with chiPer, is dropped: chiX above floor
// and above factor times chiPer (the final gate: floor 1, the prior's own
// expectation, and Config.EdgeGate; the early look: edgeEarlyFloor and
// edgeEarlyFactor). NaN is dropped.
func edgeImplausible(chiX, chiPer, floor, factor float64) bool {
	return !(chiX <= floor || chiX <= factor*chiPer)
}

// setAlpha sets w.alpha to the coefficients of the scaled point x, with the
// tilt constraint applied.
func (f *Fitter) setAlpha(w *worker, x []float64) {
	for i, v := range x {
		w.alpha[i] = v * f.scaleAt(i)
	}
	w.s.Constrain(w.alpha)
}

// scaleAt returns the optimiser's scale of parameter i: the prior rms of
// its mode for wavefront coefficients (rad), 1 px for the channel offsets
// that follow them.
func (f *Fitter) scaleAt(i int) float64 {
	m := f.basis.Count
	if i >= f.cfg.Frames*m {
		return 1
	}
	return f.scale[i%m]
}

// nollRows returns the Noll-equivalent coefficients of the flat native
// vector alpha, frames × modes.
func (f *Fitter) nollRows(alpha []float64) [][]float64 {
	m := f.basis.Count
	out := make([][]float64, f.cfg.Frames)
	for j := range out {
		out[j] = make([]float64, m)
		f.basis.NollEquivalent(out[j], alpha[j*m:(j+1)*m])
	}
	return out
}

// PriorChi2 returns the mean of α_m²/v_m over the frames and modes, with
// v_m = Variance_m·(D/r0)^(5/3) the Kolmogorov variance of the mode at the
// expected D/r0, tilts included (the prior leaves them loose, the check
// does not: a wrong registration shows there): about 1 or less for
// wavefronts of the expected seeing (less for tilts with their burst mean
// removed), and far above it for a fit that explains model error with
// large, wrong coefficients. It returns 0 for no coefficients. coeffs is
// frames × modes (native, rad).
func (f *Fitter) PriorChi2(coeffs [][]float64) float64 {
	var t float64
	n := 0
	for _, row := range coeffs {
		for k, v := range row {
			if s2 := f.chiVar[k]; s2 > 0 {
				t += v * v / s2
				n++
			}
		}
	}
	if n == 0 {
		return 0
	}
	return t / float64(n)
}

// chi2Flat is PriorChi2 of the flat coefficient vector alpha.
func (f *Fitter) chi2Flat(alpha []float64) float64 {
	m := f.basis.Count
	rows := make([][]float64, f.cfg.Frames)
	for j := range rows {
		rows[j] = alpha[j*m : (j+1)*m]
	}
	return f.PriorChi2(rows)
}

// guard keeps a fit from silently returning something worse than no
// correction. If the fitted wavefront is implausible under the turbulence
// prior (PriorChi2 above lim), the fit is repeated from the start x0 with
// the prior ten times stronger (FlagRefitted); if that is still
// implausible, the correction is dropped: the coefficients are set to zero
// but for the registered tilts of the start (FlagRejected). The worker's
// prior weight is restored before returning.
func (f *Fitter) guard(w *worker, x0 []float64, res *Result, lim float64) {
	res.Chi2 = f.chi2Flat(w.alpha)
	if res.Chi2 <= lim {
		return
	}
	res.Flags |= FlagImplausible
	base := w.s.Settings().PriorWeight
	w.s.SetPriorWeight(max(10*base, refitPrior))
	xr := f.minimise(w, x0, res, f.cfg.Stop, nil)
	w.s.SetPriorWeight(base)
	f.setAlpha(w, xr)
	res.Flags |= FlagRefitted
	res.Chi2 = f.chi2Flat(w.alpha)
	if res.Chi2 <= lim {
		return
	}
	res.Flags |= FlagRejected
	f.setAlpha(w, x0)
	m := f.basis.Count
	tilt := pd.TiltModes(f.basis)
	for i := range w.alpha[:f.cfg.Frames*m] {
		if k := i % m; k != tilt[0] && k != tilt[1] {
			w.alpha[i] = 0
		}
	}
	w.s.Constrain(w.alpha)
	res.Chi2 = f.chi2Flat(w.alpha)
}

// stages returns the number of free modes in each optimisation stage:
// the low orders first, then all (coarse-to-fine in the modes).
func (f *Fitter) stages() []int {
	m := f.basis.Count
	var st []int
	for _, k := range f.cfg.Stages {
		if k > 0 && k < m && (len(st) == 0 || k > st[len(st)-1]) {
			st = append(st, k)
		}
	}
	return append(st, m)
}

// Patch is one job for FitAll: the data and an optional start.
type Patch struct {
	Data  [][][]float64 // data[channel][frame], N×N each
	Start [][]float64   // frames × modes native coefficients; nil = zero
}

// FitAll fits the patches in parallel with the given number of workers
// (≤ 0: one per core), each owning one Objective. results[i] is nil where
// errs[i] is not; the returned error joins all per-patch errors (nil if
// all succeeded).
func (f *Fitter) FitAll(patches []Patch, workers int) (results []*Result, err error) {
	results = make([]*Result, len(patches))
	errs := make([]error, len(patches))
	ForEach(len(patches), workers, func() struct{} { return struct{}{} }, func(_ struct{}, i int) {
		r, e := f.Fit(patches[i].Data, patches[i].Start)
		if e != nil {
			errs[i] = fmt.Errorf("patch %d: %w", i, e)
			return
		}
		results[i] = r
	})
	return results, errors.Join(errs...)
}
