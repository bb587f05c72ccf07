package train

import (
	"fmt"

	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/site"
	"pdwave/simulate"
)

// FromSite returns the training setup and the simulator configuration of a
// site file, both holding the one instrument simulate.ConfigFromSite
// resolves (so the simulated bursts and the metric share optics, channels,
// sizes and the median D/r0). modes (0 = the site's) and basis ("" = the
// site's) are given as flags over the site's sizes.
func FromSite(s *site.Site, nmodes int, basis modes.Kind) (Setup, simulate.Config, error) {
	var flags instrument.Partial
	if nmodes != 0 {
		flags.Modes = instrument.Some(nmodes)
	}
	if basis != "" {
		flags.Basis = instrument.Some(basis)
	}
	sc, _, err := simulate.ConfigFromSite(s, flags)
	if err != nil {
		return Setup{}, sc, fmt.Errorf("site: %w", err)
	}
	su := Setup{Instrument: sc.Instrument, Frames: sc.Frames}
	if err := su.Validate(); err != nil {
		return su, sc, fmt.Errorf("site: %w", err)
	}
	if err := sc.Validate(); err != nil {
		return su, sc, fmt.Errorf("site: %w", err)
	}
	return su, sc, nil
}
