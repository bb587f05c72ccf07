package infer

import (
	"fmt"

	"pdwave/model/instrument"
	"pdwave/model/net"
)

// ConfigWithWeights resolves the fit configuration for a learned estimate
// by the network m: the instrument comes from src with m's patch, modes and
// basis as the weights source (they apply unless flags say otherwise; the
// optics come from the data side only), and m must be compatible with it (instrument.Compatible, and
// the network's output count equal to the modes). It is the one way every
// command decides whether weights fit the data.
//
// With optional (built-in weights), weights that do not fit are not an
// error: ConfigWithWeights returns the configuration resolved without them,
// used = false and the reason in note. Otherwise an incompatibility is an
// error. m must not be nil.
func ConfigWithWeights(src instrument.Sources, frames int, m *net.Model, optional bool) (cfg Config, used bool, note string, err error) {
	meta := m.Meta.Instrument()
	src.Weights = meta.Sizes()
	cfg, err = ConfigFor(src, frames)
	if err == nil {
		err = instrument.Compatible(meta, cfg.Instrument)
	}
	if err == nil && m.Arch.Modes != cfg.Modes {
		err = fmt.Errorf("the network predicts %d modes, the fit uses %d", m.Arch.Modes, cfg.Modes)
	}
	if err == nil {
		return cfg, true, "", nil
	}
	if !optional {
		return cfg, false, "", err
	}
	src.Weights = instrument.Partial{}
	plain, perr := ConfigFor(src, frames)
	if perr != nil {
		return plain, false, "", perr
	}
	return plain, false, err.Error(), nil
}
