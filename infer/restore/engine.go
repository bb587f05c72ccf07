package restore

import (
	"errors"
	"fmt"
	"math"

	"pdwave/infer"
	"pdwave/infer/patchrun"
	"pdwave/model/modes"
	"pdwave/model/pd"
)

// Method says how the wavefront of each patch is obtained.
type Method struct {
	// Start gives the first coefficients (typically the learned network);
	// nil means the full classical fit from zero.
	Start infer.Estimator
	// Polish is the number of classical L-BFGS iterations run from Start's
	// coefficients (0 = use them as they are). Ignored when Start is nil.
	Polish int
	// Name describes the method in outputs ("learned", "learned+polish 5",
	// "fit").
	Name string
}

// FieldSetup is the per-field setup shared by the engines of all workers: the
// classical fit configuration (telescope, patch, frames, basis, prior,
// metric settings, stopping rule of the full fit) and the wavefront method.
type FieldSetup struct {
	Config infer.Config // the full fit's configuration
	Method Method       // learned start and polish, or the full fit

	full, polish *infer.Fitter  // safe for concurrent use
	chain        patchrun.Chain // the method's stages
	div          [][]float64
	sigma2       []float64
	win          []float64
	winSum       float64
}

// TileWindow is the edge taper (fraction of the patch side per edge) of the
// object estimate that becomes a mosaic tile, and of the quality figures
// computed with it. The wavefront is fitted with the fit's own, wider taper
// (infer.DefaultConfig: 0.25, chosen on the scene mix); the tile needs a
// window that is flat over the blending zone of the overlap, since
// unapodise fades the tile to the raw data where the window is below one
// half: with a 0.25 taper and the default 16 px overlap of 64 px patches
// the blend fell in that zone and the seams showed (seam score 2.5 against
// 1.07).
const TileWindow = 0.125

// NewFieldSetup checks the configuration and prepares the fitters. It errors if
// the fit configuration is invalid or the start estimator's basis differs
// from the configured one.
func NewFieldSetup(cfg infer.Config, m Method) (*FieldSetup, error) {
	p := &FieldSetup{Config: cfg, Method: m}
	var err error
	p.full, err = infer.NewFitter(cfg)
	if err != nil {
		return nil, err
	}
	if m.Start != nil {
		b := m.Start.Basis()
		if b == nil || b.Kind != cfg.Basis || b.Count != cfg.Modes || b.N != cfg.Patch {
			return nil, fmt.Errorf("restore: estimator basis does not match the fit (%s, %d modes, %d px wanted)", cfg.Basis, cfg.Modes, cfg.Patch)
		}
		if m.Polish > 0 {
			pc := cfg
			pc.Stop = infer.Stop{Iterations: m.Polish}
			pc.ExactEdges = 0 // a polish is the periodic metric's few steps
			p.polish, err = infer.NewFitter(pc)
			if err != nil {
				return nil, err
			}
		}
	}
	p.chain = patchrun.Chain{Learned: m.Start, Polish: p.polish}
	if m.Start == nil {
		p.chain.Fit = p.full // from zero: no earlier stage
	}
	p.div = p.full.Diversity()
	p.sigma2 = p.full.PriorVariance()
	p.win = pd.Window(cfg.Patch, TileWindow)
	for _, w := range p.win {
		p.winSum += w
	}
	return p, nil
}

// Basis returns the native basis of the coefficients.
func (p *FieldSetup) Basis() *modes.Basis { return p.full.Basis() }

// NewEngine returns NewPatchEngine as an Engine (never an error), so
// p.NewEngine is a valid Options.NewEngine.
func (p *FieldSetup) NewEngine() (Engine, error) { return p.NewPatchEngine(), nil }

// NewPatchEngine returns an engine with its own pd.Objective (for the
// object estimate and the quality figures), for one goroutine.
func (p *FieldSetup) NewPatchEngine() *PatchEngine {
	cfg := p.Config
	set := cfg.Metric
	set.PriorWeight = cfg.Prior
	set.HighPassSeeing = cfg.DOverR0
	set.Window = TileWindow
	s := pd.NewObjective(p.full.Pupil(), p.full.Basis(), p.div, cfg.Frames, set)
	s.SetPrior(p.sigma2)
	n := cfg.Frames * cfg.Modes
	return &PatchEngine{p: p, s: s, alpha: make([]float64, n), obj: make([]float64, cfg.Patch*cfg.Patch)}
}

// PatchEngine is restore's Engine: the wavefront by the FieldSetup's
// method (a patchrun.Chain), then the quality figures and the restored
// tile. It is not safe for concurrent use.
type PatchEngine struct {
	p     *FieldSetup
	s     *pd.Objective
	alpha []float64
	obj   []float64
}

// Restore implements Engine: the method's estimate, then RestoreWith.
func (e *PatchEngine) Restore(r *PatchResult, data [][][]float64) error {
	cfg := e.p.Config
	if len(data) != 2 || len(data[0]) != cfg.Frames {
		return fmt.Errorf("patch has %d channels × %d frames, the estimator wants 2 × %d", len(data), len(data[0]), cfg.Frames)
	}
	est, err := e.p.chain.Estimate(data)
	if err != nil {
		var se *patchrun.StageError
		if errors.As(err, &se) {
			err = se.Err // the flagged patch names the failure itself, as always
		}
		return err
	}
	return e.RestoreWith(r, data, est.Final())
}

// RestoreWith is Restore with the wavefront coefficients given (frames ×
// modes, native basis, rad; not retained) instead of estimated: it sets
// the metric, its ratio to the noise-only expectation, the flags, the
// coefficient figures and the tile of r exactly as Restore does after its
// estimate. compare judges its own learned estimate with it. It fails on
// coefficients of the wrong shape or a patch without signal.
func (e *PatchEngine) RestoreWith(r *PatchResult, data [][][]float64, coeffs [][]float64) error {
	p := e.p
	cfg := p.Config
	m := cfg.Modes
	if len(coeffs) != cfg.Frames {
		return fmt.Errorf("estimator returned %d frames, want %d", len(coeffs), cfg.Frames)
	}
	for j, row := range coeffs {
		if len(row) != m {
			return fmt.Errorf("estimator returned %d modes, want %d", len(row), m)
		}
		copy(e.alpha[j*m:], row)
	}
	if err := e.s.SetData(data); err != nil {
		if errors.Is(err, pd.ErrNoSignal) {
			return fmt.Errorf("patch carries no signal above the noise")
		}
		return err
	}
	e.s.Constrain(e.alpha)
	e.metric(r)
	e.coeffFigures(r)
	e.s.Restore(e.obj, e.alpha)
	p.unapodise(r.Tile, e.obj, data)
	return nil
}

// metric sets r's metric at e.alpha, its ratio to the noise-only
// expectation, the signal share and the learned-suspect flag.
func (e *PatchEngine) metric(r *PatchResult) {
	p := e.p
	e.s.ValueGrad(nil, e.alpha)
	metric, _ := e.s.LastTerms()
	r.Metric = metric
	r.SignalShare = e.s.MaskShare()
	// Noise-only expectation of the object-eliminated metric: with K images
	// and white noise of power ν per frequency, the residual of the
	// least-squares object leaves (K−1)·ν per frequency (Paxman, Schulz &
	// Fienup 1992, JOSA A 9, 1072, the Gaussian-noise likelihood); L is
	// normalised by the data power per image P̄.
	k := float64(2 * p.Config.Frames)
	if nu, pbar := e.s.Noise(), e.s.DataPower(); nu > 0 && pbar > 0 {
		r.MetricRatio = metric / ((k - 1) * float64(e.s.MaskSize()) * nu / pbar)
	}
	if p.Method.Start != nil && p.polish == nil && infer.LearnedSuspect(r.SignalShare) {
		r.Flags |= FlagLearned
	}
}

// coeffFigures sets r's coefficients (native and Noll-equivalent) from
// e.alpha and their rms over the prior's standard deviation.
func (e *PatchEngine) coeffFigures(r *PatchResult) {
	p := e.p
	m := p.Config.Modes
	var s2 float64
	var cnt int
	for i, a := range e.alpha {
		if v := p.sigma2[i%m]; v > 0 && !math.IsInf(v, 1) {
			s2 += a * a / v
			cnt++
		}
	}
	if cnt > 0 {
		r.CoeffRMS = math.Sqrt(s2 / float64(cnt))
	}
	r.Coeffs = append([]float64(nil), e.alpha...)
	r.Noll = make([]float64, len(e.alpha))
	b := p.full.Basis()
	for j := 0; j < p.Config.Frames; j++ {
		b.NollEquivalent(r.Noll[j*m:(j+1)*m], e.alpha[j*m:(j+1)*m])
	}
}

// minTileWindow is the window value below which the restored patch is
// not divided by the window but faded into the burst-mean image.
const minTileWindow = 0.5

// unapodise undoes the apodisation in the object estimate. pd's Restore
// returns w·(o − m) + m (w the apodisation window, m the mean data level:
// the window-weighted image means averaged over all images), so
// o = m + (R − m)/w. Where w < minTileWindow the quotient amplifies noise;
// there the tile fades linearly in w from the quotient at w = minTileWindow
// to the burst-mean focused image at w = 0. Those pixels lie in the blend
// margin of inner patch edges (weight 0) and matter only at the field edge.
func (p *FieldSetup) unapodise(dst, obj []float64, data [][][]float64) {
	n := p.Config.Patch
	var level float64
	nimg := 0
	for c := range data {
		for _, im := range data[c] {
			var m float64
			for i, v := range im {
				m += p.win[i] * v
			}
			level += m / p.winSum
			nimg++
		}
	}
	level /= float64(nimg)
	for i := 0; i < n*n; i++ {
		w := p.win[i]
		if w >= minTileWindow {
			dst[i] = level + (obj[i]-level)/w
			continue
		}
		var raw float64
		for _, im := range data[0] {
			raw += im[i]
		}
		raw /= float64(len(data[0]))
		t := w / minTileWindow
		dst[i] = t*(level+(obj[i]-level)/minTileWindow) + (1-t)*raw
	}
}
