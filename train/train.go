package train

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"sync"

	"pdwave/model/instrument"
	"pdwave/model/net"
	"pdwave/model/pd"
)

// DefaultLR is the peak Adam step size used when none is given (Config.LR,
// Job.LR and the --lr flag of pdwave train; the shipped weights were
// trained with it).
const DefaultLR = 3e-3

// Config sets up a training run.
type Config struct {
	Steps       int        // optimiser steps in all (warm start included)
	Batch       int        // bursts per step
	LR          float64    // peak Adam step size; 0 uses DefaultLR
	Warmup      int        // steps of linear warm-up; 0 uses min(100, Steps/10)
	MinLR       float64    // final step size as a fraction of LR (cosine decay); 0 uses 0.05
	ClipNorm    float64    // clip the global gradient norm to this; 0 = no clipping
	PriorWeight float64    // weight of the Kolmogorov prior against the normalised metric; 0 uses the fit's (pd.DefaultSettings)
	WarmStart   int        // first steps supervised on simulated truth (needs truth); 0 = none
	Seed        uint64     // weights, data order
	Workers     int        // goroutines for the per-burst work; 0 = all cores
	Arch        *net.Arch  // nil uses net.DefaultArch(Modes); ignored with Init
	Init        *net.Model `json:"-"` // start from these weights (fine-tuning) instead of drawing them from Seed; must match the setup; not kept in checkpoints (they hold the weights)
	Gamma       float64    // noise-filter regulariser of the metric (pd.Settings.Gamma); 0 uses the fit's (pd.DefaultSettings)
	Reuse       int        // uses of each simulated burst (Job's data stream; recorded for resume)
	Data        SimData    // how simulated bursts vary (Job's data stream; recorded for resume); zero for runs from before the setting
}

func (c *Config) fill() error {
	if c.Steps < 1 || c.Batch < 1 {
		return fmt.Errorf("train: %d steps of %d bursts", c.Steps, c.Batch)
	}
	if c.LR == 0 {
		c.LR = DefaultLR
	}
	if c.Warmup == 0 {
		c.Warmup = min(100, c.Steps/10)
	}
	if c.MinLR == 0 {
		c.MinLR = 0.05
	}
	if c.PriorWeight == 0 {
		c.PriorWeight = pd.DefaultSettings().PriorWeight
	}
	if c.Gamma == 0 {
		c.Gamma = pd.DefaultSettings().Gamma
	}
	if c.Workers <= 0 {
		c.Workers = runtime.GOMAXPROCS(0)
	}
	if !(c.LR > 0) || c.Warmup < 0 || c.MinLR < 0 || c.MinLR > 1 || c.ClipNorm < 0 || c.PriorWeight < 0 || !(c.Gamma > 0) || c.WarmStart < 0 {
		return fmt.Errorf("train: invalid settings %+v", *c)
	}
	return nil
}

// LRAt returns the step size of step (0-based): linear warm-up over Warmup
// steps, then a cosine decay from LR to MinLR·LR at the last step
// (Loshchilov & Hutter 2017, eq. 5, one cycle).
func (c Config) LRAt(step int) float64 {
	if step < c.Warmup {
		return c.LR * float64(step+1) / float64(c.Warmup)
	}
	span := c.Steps - c.Warmup
	p := 1.0
	if span > 1 {
		p = float64(step-c.Warmup) / float64(span-1)
	}
	p = math.Min(1, math.Max(0, p))
	return c.LR * (c.MinLR + (1-c.MinLR)*0.5*(1+math.Cos(math.Pi*p)))
}

// worker holds the per-goroutine state of a step.
type worker struct {
	solver *pd.Objective
	feat   *net.Featurizer
	pred   *net.Predictor
	alpha  []float64
	grad   []float64
	target []float64
}

// StepStats summarises one step.
type StepStats struct {
	Step       int     // 0-based index of the step just taken
	Loss       float64 // mean loss over the usable bursts
	Metric     float64 // mean normalised metric (unsupervised steps)
	Prior      float64 // mean prior term
	Supervised bool
	Skipped    int     // bursts without usable signal
	LR         float64 // step size used
	GradNorm   float64 // global gradient norm before clipping
}

// Trainer runs the optimisation. It is not safe for concurrent use.
type Trainer struct {
	cfg    Config
	prob   *problem
	model  *net.Model
	graph  *net.Graph
	src    Source
	work   []*worker
	adam   adamState
	step   int
	x, gin []float64
	loss   []float64 // per burst of the current step
	terms  [][2]float64
	ok     []bool
	errs   []error
}

// adamState is Adam's moment estimates (Kingma & Ba 2015, Algorithm 1).
type adamState struct {
	M, V [][]float64
}

// New starts a run with fresh weights drawn from cfg.Seed, or from cfg.Init
// (whose optics, patch, basis and mode count must match setup; the weights
// are trained in place).
func New(setup Setup, cfg Config, src Source) (*Trainer, error) {
	if err := cfg.fill(); err != nil {
		return nil, err
	}
	prob, err := newProblem(setup, cfg.PriorWeight, cfg.Gamma)
	if err != nil {
		return nil, err
	}
	if m := cfg.Init; m != nil {
		if err := instrument.Compatible(m.Meta.Instrument(), setup.Instrument); err != nil {
			return nil, fmt.Errorf("train: starting weights: %w", err)
		}
		if m.Arch.Modes != setup.Modes {
			return nil, fmt.Errorf("train: starting weights have %d outputs, the setup %d modes", m.Arch.Modes, setup.Modes)
		}
		cfg.Init = nil // the checkpoints hold the weights from here on
		tr := m.Meta.Training
		m.Meta = setup.Meta()
		m.Meta.Training = tr
		return newTrainer(prob, cfg, m, src)
	}
	arch := net.DefaultArch(setup.Modes)
	if cfg.Arch != nil {
		arch = *cfg.Arch
		arch.Modes = setup.Modes
	}
	model, err := net.New(arch, setup.Meta(), prob.scale, cfg.Seed)
	if err != nil {
		return nil, err
	}
	return newTrainer(prob, cfg, model, src)
}

func newTrainer(prob *problem, cfg Config, model *net.Model, src Source) (*Trainer, error) {
	s := prob.setup
	if model.Arch.Modes != s.Modes || model.Meta.Patch != s.Patch {
		return nil, fmt.Errorf("train: model has %d modes and %d px patches, setup %d and %d", model.Arch.Modes, model.Meta.Patch, s.Modes, s.Patch)
	}
	g, err := net.NewGraph(model, cfg.Batch, s.Frames)
	if err != nil {
		return nil, err
	}
	t := &Trainer{cfg: cfg, prob: prob, model: model, graph: g, src: src}
	for w := 0; w < cfg.Workers; w++ {
		f, err := net.NewFeaturizer(model)
		if err != nil {
			return nil, err
		}
		n := s.Frames * s.Modes
		t.work = append(t.work, &worker{
			solver: prob.newSolver(), feat: f, pred: net.NewPredictor(model),
			alpha: make([]float64, n), grad: make([]float64, n), target: make([]float64, n),
		})
	}
	for _, p := range model.Params {
		t.adam.M = append(t.adam.M, make([]float64, len(p.Data)))
		t.adam.V = append(t.adam.V, make([]float64, len(p.Data)))
	}
	t.x = make([]float64, g.InputLen())
	t.gin = make([]float64, cfg.Batch*s.Frames*s.Modes)
	t.loss = make([]float64, cfg.Batch)
	t.terms = make([][2]float64, cfg.Batch)
	t.ok = make([]bool, cfg.Batch)
	t.errs = make([]error, cfg.Batch)
	return t, nil
}

// Model returns the network being trained (its weights change with Step).
func (t *Trainer) Model() *net.Model { return t.model }

// Steps returns the number of steps taken so far.
func (t *Trainer) Steps() int { return t.step }

// Config returns the settings in use, defaults filled in.
func (t *Trainer) Config() Config { return t.cfg }

// Done reports whether all configured steps are taken.
func (t *Trainer) Done() bool { return t.step >= t.cfg.Steps }

// Close releases the gorgonia machine.
func (t *Trainer) Close() error { return t.graph.Close() }

// Step takes one optimiser step on the next batch of the source. Bursts with
// no signal above the noise are skipped (their gradient is zero); it is an
// error if no burst of the batch is usable.
func (t *Trainer) Step() (StepStats, error) {
	if t.Done() {
		return StepStats{}, fmt.Errorf("train: all %d steps taken", t.cfg.Steps)
	}
	st, grads, err := t.lossGrad(t.step)
	if err != nil {
		return st, err
	}
	st.GradNorm = t.adamStep(grads, st.LR)
	t.step++
	return st, nil
}

// lossGrad evaluates the mean loss of the batch of step and its gradient
// with respect to every weight tensor (returned slices belong to the graph).
func (t *Trainer) lossGrad(step int) (StepStats, [][]float64, error) {
	st := StepStats{Step: step, Supervised: step < t.cfg.WarmStart, LR: t.cfg.LRAt(step)}
	s := t.prob.setup
	B := t.cfg.Batch
	per := len(t.x) / B
	nout := s.Frames * s.Modes
	var wg sync.WaitGroup
	for w := range t.work {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			for b := w; b < B; b += len(t.work) {
				idx := uint64(step)*uint64(B) + uint64(b)
				t.ok[b], t.errs[b] = false, nil
				l, terms, err := t.work[w].burst(t, idx, st.Supervised, t.x[b*per:(b+1)*per], t.gin[b*nout:(b+1)*nout])
				if err != nil {
					if errors.Is(err, pd.ErrNoSignal) {
						clear(t.gin[b*nout : (b+1)*nout])
						clear(t.x[b*per : (b+1)*per])
						continue
					}
					t.errs[b] = fmt.Errorf("burst %d of step %d: %w", b, step, err)
					continue
				}
				t.loss[b], t.terms[b], t.ok[b] = l, terms, true
			}
		}(w)
	}
	wg.Wait()
	used := 0
	for b := 0; b < B; b++ {
		if t.errs[b] != nil {
			return st, nil, fmt.Errorf("train: %w", t.errs[b])
		}
		if t.ok[b] {
			used++
			st.Loss += t.loss[b]
			st.Metric += t.terms[b][0]
			st.Prior += t.terms[b][1]
		}
	}
	st.Skipped = B - used
	if used == 0 {
		return st, nil, fmt.Errorf("train: no burst of step %d has signal above the noise", step)
	}
	st.Loss /= float64(used)
	st.Metric /= float64(used)
	st.Prior /= float64(used)
	inv := 1 / float64(used)
	for i := range t.gin {
		t.gin[i] *= inv
	}
	grads, err := t.graph.Backward(t.x, t.gin, nil)
	if err != nil {
		return st, nil, fmt.Errorf("train: step %d: %w", step, err)
	}
	return st, grads, nil
}

// burst computes the features, the loss and ∂loss/∂y of one burst into x and
// gin (rows of this burst).
func (w *worker) burst(t *Trainer, idx uint64, supervised bool, x, gin []float64) (float64, [2]float64, error) {
	smp, err := t.src.Get(idx)
	if err != nil {
		return 0, [2]float64{}, err
	}
	s := t.prob.setup
	if err := w.feat.Burst(x, smp.Data); err != nil {
		return 0, [2]float64{}, err
	}
	w.pred.Forward(w.alpha, x, s.Frames)
	scale := t.prob.scale
	nm := s.Modes
	if supervised {
		if smp.Noll == nil {
			return 0, [2]float64{}, fmt.Errorf("supervised warm start needs bursts with truth")
		}
		if err := w.truthNative(t.prob, smp.Noll); err != nil {
			return 0, [2]float64{}, err
		}
		// L = ½ Σ ((α − α_true)/σ)² / frames, in units of the prior.
		var l float64
		for i, a := range w.alpha {
			d := (a - w.target[i]) / scale[i%nm]
			l += 0.5 * d * d
			gin[i] = d / float64(s.Frames)
		}
		l /= float64(s.Frames)
		return l, [2]float64{l, 0}, nil
	}
	in := [][][]float64{smp.Data[0], smp.Data[1]}
	if err := w.solver.SetData(in); err != nil {
		return 0, [2]float64{}, err
	}
	l := w.solver.ValueGrad(w.grad, w.alpha)
	m, p := w.solver.LastTerms()
	for i, g := range w.grad {
		gin[i] = g * scale[i%nm] // ∂L/∂y = σ ∂L/∂α
	}
	return l, [2]float64{m, p}, nil
}

// truthNative sets w.target to the native coefficients of the truth with the
// burst-mean tilt removed (the metric cannot see it).
func (w *worker) truthNative(p *problem, noll [][]float64) error {
	s := p.setup
	if len(noll) != s.Frames {
		return fmt.Errorf("truth has %d frames, burst %d", len(noll), s.Frames)
	}
	for j, row := range noll {
		if len(row) < s.Modes {
			return fmt.Errorf("truth has %d Noll modes, training estimates %d", len(row), s.Modes)
		}
		p.nativeFromNoll(w.target[j*s.Modes:(j+1)*s.Modes], row)
	}
	w.solver.Constrain(w.target)
	return nil
}

// adamStep applies one Adam update with step size lr to the model's weights
// and returns the global gradient norm (before clipping).
func (t *Trainer) adamStep(grads [][]float64, lr float64) float64 {
	const b1, b2, eps = 0.9, 0.999, 1e-8
	var ss float64
	for _, g := range grads {
		for _, v := range g {
			ss += v * v
		}
	}
	norm := math.Sqrt(ss)
	c := 1.0
	if t.cfg.ClipNorm > 0 && norm > t.cfg.ClipNorm {
		c = t.cfg.ClipNorm / norm
	}
	k := float64(t.step + 1)
	bc1 := 1 - math.Pow(b1, k)
	bc2 := 1 - math.Pow(b2, k)
	for i, p := range t.model.Params {
		m, v, g := t.adam.M[i], t.adam.V[i], grads[i]
		for j := range p.Data {
			gj := c * g[j]
			m[j] = b1*m[j] + (1-b1)*gj
			v[j] = b2*v[j] + (1-b2)*gj*gj
			p.Data[j] -= lr * (m[j] / bc1) / (math.Sqrt(v[j]/bc2) + eps)
		}
	}
	return norm
}
