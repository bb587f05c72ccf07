package train

import (
	"fmt"

	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/site"
	"pdwave/simulate"
)

// FromSite returns the training setup and the simulator configuration of a
// site file. modes (0 = the site's) and basis ("" = the site's) override the
// site's sizes.
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
	name := s.Tel.Name
	if name == "" {
		name = "unnamed site"
	}
	su := Setup{
		Site: name, Telescope: sc.Telescope, DiversityPV: sc.SecondDiversity(), R0: s.R0Median(),
		Patch: sc.Patch, Frames: sc.Frames, Modes: sc.Modes, Basis: sc.Basis,
	}
	if err := su.Validate(); err != nil {
		return su, sc, fmt.Errorf("site: %w", err)
	}
	if err := sc.Validate(); err != nil {
		return su, sc, fmt.Errorf("site: %w", err)
	}
	return su, sc, nil
}
