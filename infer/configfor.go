package infer

import (
	"strconv"

	"pdwave/model/burst"
	"pdwave/model/instrument"
)

// ConfigFor returns the fit configuration for bursts of the given frame
// count with the instrument resolved from src (instrument.Resolve: flags,
// then the burst header, then the weights, then the site file, then the
// defaults), the rest (prior, metric, stopping rule, guard) from
// DefaultConfig. The Notes of the resolution are kept in Config.Notes for
// provenance. It errors, naming what is missing or invalid, when the
// instrument cannot be resolved.
func ConfigFor(src instrument.Sources, frames int) (Config, error) {
	cfg := DefaultConfig()
	cfg.Frames = frames
	in, notes, err := instrument.Resolve(src)
	if err != nil {
		return cfg, err
	}
	cfg.Instrument, cfg.Notes = in, notes
	return cfg, nil
}

// HeaderInstrument returns what a burst header says about the instrument
// (burst.Optics; an explicit value, zero included, is set): wavelength,
// pixel scale, diameter, obscuration and the diversity of the second
// channel (channel 0 in focus).
func HeaderInstrument(o burst.Optics) instrument.Partial {
	p := instrument.Partial{Wavelength: o.Wavelength, PixelScale: o.PixelScale, Diameter: o.Diameter, Obscuration: o.Obscuration}
	if v, ok := o.DiversityPV.Get(); ok {
		p.Diversity = instrument.Some([]float64{0, v})
	}
	return p
}

// Settings describes the configuration for provenance (FITS HISTORY cards
// via fits.Provenance, "# key: value" lines of a coefficient CSV): the
// instrument's settings (instrument.Instrument.Settings), frames,
// iterations, exact-edge iterations and gate, prior and, when known, where each instrument value came from
// ("from"). The caller adds its own keys (command, input files, patch
// position).
func (c Config) Settings() map[string]string {
	m := c.Instrument.Settings()
	m["frames"] = strconv.Itoa(c.Frames)
	m["iterations"] = strconv.Itoa(c.Stop.Iterations)
	m["exact_edges"] = strconv.Itoa(c.ExactEdges)
	m["edge_gate"] = strconv.FormatFloat(c.EdgeGate, 'g', -1, 64)
	m["prior"] = strconv.FormatFloat(c.Prior, 'g', -1, 64)
	if len(c.Notes) > 0 {
		m["from"] = c.Notes.String()
	}
	return m
}
