package restore

import (
	"fmt"

	"pdwave/infer"
	"pdwave/model/instrument"
	"pdwave/model/net"
)

// Network is an infer.Estimator backed by a trained network (model/net):
// an infer.NetEstimator whose weights were checked against the optics and
// sizes of a fit configuration. It is safe for concurrent use.
type Network struct {
	*infer.NetEstimator
}

// NewNetwork wraps model m for patches of the fit configuration cfg. It
// errors if the weights were made for other optics, another basis, mode
// count or patch size (instrument.Compatible); the estimator's basis (the one
// the coefficients refer to) is built for cfg.
func NewNetwork(m *net.Model, cfg infer.Config) (*Network, error) {
	if err := instrument.Compatible(m.Meta.Instrument(), cfg.Instrument); err != nil {
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
	return &Network{est}, nil
}
