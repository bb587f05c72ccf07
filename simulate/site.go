package simulate

import (
	"math/rand/v2"

	"pdwave/model/burst"
	"pdwave/model/site"
)

// ConfigFromSite returns the Config a site file describes: its telescope
// and diversity, the seeing at the observing wavelength (r0 the site's
// median, L0, layers), the camera and the sizes (patch, frames, modes,
// basis).
func ConfigFromSite(s *site.Site) Config {
	var layers []Layer
	for _, l := range s.Seeing.Layers {
		layers = append(layers, Layer{Height: l.HeightM, Weight: l.Weight, Speed: l.WindMS, Direction: l.WindDirection()})
	}
	return Config{
		Telescope:     s.Telescope(),
		DiversityPV:   s.DiversityPV(),
		Turbulence:    Turbulence{R0: s.MedianR0(), L0: s.OuterScale(), Layers: layers},
		FrameInterval: s.Camera.FrameIntervalS,
		Camera: Camera{Photons: s.Camera.PhotonsPerPixel, ReadNoise: s.Camera.ReadNoiseE,
			Bits: s.Camera.BitDepth, Gain: s.Camera.GainEPerADU},
		Patch:  s.Sizes.Patch,
		Frames: s.Sizes.Frames,
		Basis:  s.Sizes.Basis,
		Modes:  s.Sizes.Modes,
	}
}

// Patch simulates one on-axis burst for the site (Simulator.Patch) with r0
// drawn from the site's seeing distribution unless o.R0 is set. It builds a
// Simulator on every call; for many bursts make one with New and call its
// Patch. Deterministic given rng.
func Patch(s *site.Site, rng *rand.Rand, o Options) (*burst.Burst, error) {
	sim, err := New(ConfigFromSite(s))
	if err != nil {
		return nil, err
	}
	if o.R0 == 0 {
		o.R0 = s.DrawR0(rng)
	}
	r, err := sim.Patch(rng, o)
	if err != nil {
		return nil, err
	}
	return r.Burst, nil
}

// Field simulates one nx×ny full-field burst for the site
// (Simulator.Field) with r0 drawn from the site's seeing distribution
// unless o.R0 is set. Deterministic given rng.
func Field(s *site.Site, rng *rand.Rand, nx, ny int, o Options) (*burst.Burst, error) {
	sim, err := New(ConfigFromSite(s))
	if err != nil {
		return nil, err
	}
	if o.R0 == 0 {
		o.R0 = s.DrawR0(rng)
	}
	r, err := sim.Field(rng, nx, ny, o)
	if err != nil {
		return nil, err
	}
	return r.Burst, nil
}
