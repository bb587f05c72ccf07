package restore

import (
	"fmt"

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

// Learned is an infer.Estimator backed by a trained network (model/net):
// an infer.NetEstimator whose weights were checked against the optics and
// sizes of a fit configuration. It is safe for concurrent use.
type Learned struct {
	*infer.NetEstimator
}

// NewLearned wraps model m for patches of the fit configuration cfg. It
// errors if the weights were made for other optics, another basis, mode
// count or patch size (net.Meta.Compatible); the estimator's basis (the one
// the coefficients refer to) is built for cfg.
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
	est, err := infer.NewNetEstimator(m, fit.Basis())
	if err != nil {
		return nil, fmt.Errorf("restore: %w", err)
	}
	return &Learned{est}, nil
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
