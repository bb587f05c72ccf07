package restore

import (
	"fmt"
	"sync"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/site"
)

// FitConfig returns the classical fit configuration for restoring bursts
// with the given optics (header values of the burst, zero where unknown) on
// site s: infer.ConfigFor with the patch side as the only override (patch ≤ 0
// = the site's), then the sampling check for that patch.
func FitConfig(s *site.Site, o burst.Optics, frames, patch int) (infer.Config, error) {
	return restoreConfig(s, o, frames, patch)
}

// HeaderConfig is FitConfig without a site file: optics from the burst
// header (all of wavelength, pixel scale, diameter and diversity must be
// present), 64 px patches unless patch > 0, 36 KL modes and an expected
// D/r0 of 5 for the prior (infer.ConfigFor with a nil site).
func HeaderConfig(o burst.Optics, frames, patch int) (infer.Config, error) {
	return restoreConfig(nil, o, frames, patch)
}

func restoreConfig(s *site.Site, o burst.Optics, frames, patch int) (infer.Config, error) {
	cfg, err := infer.ConfigFor(s, o, frames, infer.Overrides{Patch: patch})
	if err != nil {
		if s == nil {
			return cfg, fmt.Errorf("restore: %w; give a site file (--site)", err)
		}
		return cfg, fmt.Errorf("restore: %w", err)
	}
	if err := cfg.Telescope.CheckSampling(cfg.Patch); err != nil {
		return cfg, fmt.Errorf("restore: %w", err)
	}
	return cfg, nil
}

// Learned is an infer.Estimator backed by a trained network (model/net). It
// keeps a pool of featurizer/predictor pairs, one per concurrent caller, so
// it is safe for concurrent use.
type Learned struct {
	model *net.Model
	basis *modes.Basis
	mu    sync.Mutex
	free  []*restoreNetWorker
}

type restoreNetWorker struct {
	f   *net.Featurizer
	p   *net.Predictor
	x   []float64
	out []float64
}

// NewLearned wraps model m for patches of the fit configuration cfg. It
// errors if the weights were made for other optics, another basis, mode
// count or patch size (net.Meta.Compatible), and returns the basis the
// coefficients refer to (built for cfg).
func NewLearned(m *net.Model, cfg infer.Config) (*Learned, error) {
	want := net.Meta{Basis: string(cfg.Basis), Modes: cfg.Modes, Patch: cfg.Patch,
		Diameter: cfg.Telescope.Diameter, Obscuration: cfg.Telescope.Obscuration,
		Wavelength: cfg.Telescope.Wavelength, PixelScale: cfg.Telescope.PixelScale}
	if len(cfg.DiversityPV) > 1 {
		want.DiversityPV = cfg.DiversityPV[1]
	}
	if err := m.Meta.Compatible(want); err != nil {
		return nil, fmt.Errorf("restore: weights do not fit the data: %w", err)
	}
	if m.Arch.Modes != cfg.Modes {
		return nil, fmt.Errorf("restore: network predicts %d modes, the fit uses %d", m.Arch.Modes, cfg.Modes)
	}
	fit, err := infer.NewFitter(cfg)
	if err != nil {
		return nil, err
	}
	l := &Learned{model: m, basis: fit.Basis()}
	if _, err := l.get(); err != nil {
		return nil, err
	}
	return l, nil
}

// LearnedConfig adjusts cfg to the weights' basis and mode count, so that a
// site file with other sizes can still use shipped weights.
func LearnedConfig(m *net.Model, cfg infer.Config) infer.Config {
	if m.Meta.Basis != "" {
		cfg.Basis = modes.Kind(m.Meta.Basis)
	}
	if m.Arch.Modes > 0 {
		cfg.Modes = m.Arch.Modes
	}
	return cfg
}

func (l *Learned) get() (*restoreNetWorker, error) {
	l.mu.Lock()
	if n := len(l.free); n > 0 {
		w := l.free[n-1]
		l.free = l.free[:n-1]
		l.mu.Unlock()
		return w, nil
	}
	l.mu.Unlock()
	f, err := net.NewFeaturizer(l.model)
	if err != nil {
		return nil, fmt.Errorf("restore: %w", err)
	}
	return &restoreNetWorker{f: f, p: net.NewPredictor(l.model)}, nil
}

func (l *Learned) put(w *restoreNetWorker) {
	l.mu.Lock()
	l.free = append(l.free, w)
	l.mu.Unlock()
}

// Basis implements infer.Estimator.
func (l *Learned) Basis() *modes.Basis { return l.basis }

// Estimate implements infer.Estimator: the network's coefficients for every
// frame (frames × modes, rad). data is data[channel][frame] with two
// channels.
func (l *Learned) Estimate(data [][][]float64) ([][]float64, error) {
	if len(data) != 2 {
		return nil, fmt.Errorf("restore: learned estimator needs 2 channels, got %d", len(data))
	}
	w, err := l.get()
	if err != nil {
		return nil, err
	}
	defer l.put(w)
	frames := len(data[0])
	if n := w.f.Len(frames); len(w.x) != n {
		w.x = make([]float64, n)
	}
	if err := w.f.Burst(w.x, [2][][]float64{data[0], data[1]}); err != nil {
		return nil, fmt.Errorf("restore: %w", err)
	}
	m := l.model.Arch.Modes
	if len(w.out) != frames*m {
		w.out = make([]float64, frames*m)
	}
	w.p.Forward(w.out, w.x, frames)
	c := make([][]float64, frames)
	for j := range c {
		c[j] = append([]float64(nil), w.out[j*m:(j+1)*m]...)
	}
	return c, nil
}
