package simulate

import (
	"fmt"
	"math"
	"math/rand/v2"

	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/site"
)

// ConfigFromSite returns the Config a site file describes, with flags
// (values given on the command line; the zero Partial for none) taking
// precedence: the instrument is instrument.Resolve over the flags and the
// site's Partial (site.Site.Instrument), and the seeing its median r0 at
// the observing wavelength (D/r0 of the resolved instrument), outer scale
// (0 = Kolmogorov) and the site's layers; the camera and the frame count
// are the site's. The notes say where each instrument value came from, for
// the provenance of what is simulated. It errors if the resolved
// instrument is unusable.
func ConfigFromSite(s *site.Site, flags instrument.Partial) (Config, instrument.Notes, error) {
	in, notes, err := instrument.Resolve(instrument.Sources{Flags: flags, Site: s.Instrument()})
	if err != nil {
		return Config{}, notes, fmt.Errorf("simulate: site %q: %w", s.Tel.Name, err)
	}
	var layers []Layer
	for _, l := range s.Seeing.Layers {
		layers = append(layers, Layer{Height: l.HeightM, Weight: l.Weight, Speed: l.WindMS, Direction: l.WindDirection()})
	}
	l0 := in.OuterScale
	if l0 == 0 {
		l0 = math.Inf(1) // Kolmogorov
	}
	return Config{
		Instrument:    in,
		Turbulence:    Turbulence{R0: in.Telescope.Diameter / in.DOverR0, L0: l0, Layers: layers},
		FrameInterval: s.Camera.FrameIntervalS,
		Camera: Camera{Photons: s.Camera.PhotonsPerPixel, ReadNoise: s.Camera.ReadNoiseE,
			Bits: s.Camera.BitDepth, Gain: s.Camera.GainEPerADU},
		Frames: s.Sizes.Frames,
	}, notes, nil
}

// Patch simulates one on-axis burst for the site (Simulator.Patch) with r0
// drawn from the site's seeing distribution unless o.R0 is set. It builds a
// Simulator on every call; for many bursts make one with New and call its
// Patch. Deterministic given rng.
func Patch(s *site.Site, rng *rand.Rand, o Options) (*burst.Burst, error) {
	cfg, _, err := ConfigFromSite(s, instrument.Partial{})
	if err != nil {
		return nil, err
	}
	sim, err := New(cfg)
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
	cfg, _, err := ConfigFromSite(s, instrument.Partial{})
	if err != nil {
		return nil, err
	}
	sim, err := New(cfg)
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
