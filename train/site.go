package train

import (
	"fmt"

	"pdwave/model/modes"
	"pdwave/model/site"
	"pdwave/simulate"
)

// FromSite returns the training setup and the simulator configuration of a
// site file. modes (0 = the site's) and basis ("" = the site's) override the
// site's sizes.
func FromSite(s *site.Site, nmodes int, basis modes.Kind) (Setup, simulate.Config, error) {
	if nmodes == 0 {
		nmodes = s.Sizes.Modes
	}
	if basis == "" {
		basis = s.Sizes.Basis
	}
	name := s.Tel.Name
	if name == "" {
		name = "unnamed site"
	}
	su := Setup{
		Site: name, Telescope: s.Telescope(), DiversityPV: s.DiversityPV(), R0: s.R0Median(),
		Patch: s.Sizes.Patch, Frames: s.Sizes.Frames, Modes: nmodes, Basis: basis,
	}
	var layers []simulate.Layer
	for _, l := range s.Seeing.Layers {
		layers = append(layers, simulate.Layer{Height: l.HeightM, Weight: l.Weight, Speed: l.WindMS, Direction: l.WindDirection()})
	}
	sc := simulate.Config{
		Telescope:     su.Telescope,
		DiversityPV:   su.DiversityPV,
		Turbulence:    simulate.Turbulence{R0: su.R0, L0: s.OuterScale(), Layers: layers},
		FrameInterval: s.Camera.FrameIntervalS,
		Camera: simulate.Camera{Photons: s.Camera.PhotonsPerPixel, ReadNoise: s.Camera.ReadNoiseE,
			Bits: s.Camera.BitDepth, Gain: s.Camera.GainEPerADU},
		Patch: su.Patch, Frames: su.Frames, Basis: basis, Modes: nmodes,
	}
	if err := su.Validate(); err != nil {
		return su, sc, fmt.Errorf("site: %w", err)
	}
	if err := sc.Validate(); err != nil {
		return su, sc, fmt.Errorf("site: %w", err)
	}
	return su, sc, nil
}
