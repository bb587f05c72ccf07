package instrument

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"pdwave/model/modes"
	"pdwave/model/optics"
)

// Partial is what one source says about the instrument. Every field may be
// unset; an explicit zero (OBSCUR = 0 in a header, --modes given as a flag)
// is set. Units are those of Instrument.
type Partial struct {
	Site        Opt[string]
	Wavelength  Opt[float64]   // λ, m
	PixelScale  Opt[float64]   // p, rad per pixel
	Diameter    Opt[float64]   // D, m
	Obscuration Opt[float64]   // fraction of D
	Spiders     Opt[int]       // number of spider vanes
	SpiderWidth Opt[float64]   // vane width, m
	FocalRatio  Opt[float64]   // F#
	Diversity   Opt[[]float64] // per channel, waves PV (channel 0 first)
	Patch       Opt[int]       // N, px
	Modes       Opt[int]       // piston excluded
	Basis       Opt[modes.Kind]
	// DOverR0 is an explicit expected D/r0 at λ. A source that gives R0
	// instead gives D/r0 through it (see Resolve).
	DOverR0 Opt[float64]
	// R0 is the median Fried parameter, m, at R0Wavelength (unset: at the
	// resolved λ).
	R0           Opt[float64]
	R0Wavelength Opt[float64] // m
	OuterScale   Opt[float64] // L0, m; an explicit 0 is Kolmogorov
}

// Source names a source of settings. Higher values take precedence.
type Source int

// The sources in increasing precedence.
const (
	FromDefault Source = iota // the built-in defaults
	FromSite                  // the site file
	FromWeights               // the weights' metadata
	FromHeader                // the burst header
	FromFlags                 // the command line
)

// String returns the source's name as outputs record it.
func (s Source) String() string {
	switch s {
	case FromDefault:
		return "default"
	case FromSite:
		return "site"
	case FromWeights:
		return "weights"
	case FromHeader:
		return "header"
	case FromFlags:
		return "flags"
	}
	return fmt.Sprintf("source(%d)", int(s))
}

// Sources are the Partials of every source; any may be empty.
type Sources struct {
	Flags, Header, Weights, Site Partial
}

// Notes records, for each Instrument setting, the Source its value came
// from. Keys are those of Instrument.Settings.
type Notes map[string]Source

// String lists the notes as "key=source" in key order, comma separated.
func (n Notes) String() string {
	keys := make([]string, 0, len(n))
	for k := range n {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = k + "=" + n[k].String()
	}
	return strings.Join(parts, ", ")
}

// Defaults of the values a source may leave out. The patch, mode count
// and basis are those the shipped weights use; D/r0 = 5 is moderate
// daytime seeing at a 0.5 m aperture (common practice).
const (
	DefaultPatch   = 64
	DefaultModes   = 36
	DefaultBasis   = modes.KindKL
	DefaultDOverR0 = 5.0
)

// Resolve combines the sources into an Instrument with one precedence for
// every field: flags, then the burst header, then the weights' metadata,
// then the site file, then the defaults — the most specific to the data at
// hand wins. Weights rank above the site because a network runs only with
// its own patch, modes and basis; callers give as the weights source only
// those (Partial.Sizes), and check the weights' optics against the
// resolved instrument with Compatible.
//
// Wavelength, pixel scale, diameter and diversity have no default: if no
// source gives one, Resolve errors naming every missing value. D/r0 comes
// from the highest source giving either DOverR0 or R0; an R0 at another
// wavelength is rescaled as r0 ∝ λ^(6/5) (Roddier 1981, Progress in Optics
// 19, 281, eq. 3.8 via Fried 1966). The result is validated
// (Instrument.Validate).
func Resolve(s Sources) (Instrument, Notes, error) {
	ps := [...]*Partial{FromFlags: &s.Flags, FromHeader: &s.Header, FromWeights: &s.Weights, FromSite: &s.Site, FromDefault: {}}
	order := []Source{FromFlags, FromHeader, FromWeights, FromSite}
	notes := Notes{}
	f64 := func(key string, field func(*Partial) Opt[float64]) float64 {
		return first(ps, order, notes, key, field, 0)
	}
	var in Instrument
	t := &in.Telescope
	t.Wavelength = f64("wavelength", func(p *Partial) Opt[float64] { return p.Wavelength })
	t.PixelScale = f64("pixel_scale", func(p *Partial) Opt[float64] { return p.PixelScale })
	t.Diameter = f64("diameter", func(p *Partial) Opt[float64] { return p.Diameter })
	t.Obscuration = f64("obscuration", func(p *Partial) Opt[float64] { return p.Obscuration })
	t.SpiderWidth = f64("spider_width", func(p *Partial) Opt[float64] { return p.SpiderWidth })
	t.FocalRatio = f64("focal_ratio", func(p *Partial) Opt[float64] { return p.FocalRatio })
	in.OuterScale = f64("outer_scale", func(p *Partial) Opt[float64] { return p.OuterScale })
	in.Site = first(ps, order, notes, "site", func(p *Partial) Opt[string] { return p.Site }, "")
	t.Spiders = first(ps, order, notes, "spiders", func(p *Partial) Opt[int] { return p.Spiders }, 0)
	in.Patch = first(ps, order, notes, "patch", func(p *Partial) Opt[int] { return p.Patch }, DefaultPatch)
	in.Modes = first(ps, order, notes, "modes", func(p *Partial) Opt[int] { return p.Modes }, DefaultModes)
	in.Basis = first(ps, order, notes, "basis", func(p *Partial) Opt[modes.Kind] { return p.Basis }, DefaultBasis)
	in.Diversity = slices.Clone(first(ps, order, notes, "diversity", func(p *Partial) Opt[[]float64] { return p.Diversity }, nil))
	var missing []string
	for _, k := range []string{"wavelength", "pixel_scale", "diameter", "diversity"} {
		if notes[k] == FromDefault {
			missing = append(missing, strings.ReplaceAll(k, "_", " "))
		}
	}
	if len(missing) > 0 {
		return in, notes, fmt.Errorf("the %s %s not given by the flags, the burst header, the weights or the site file", strings.Join(missing, ", "), isAre(len(missing)))
	}
	if err := resolveDOverR0(&in, ps[:], order, notes); err != nil {
		return in, notes, err
	}
	if err := in.Validate(); err != nil {
		return in, notes, fmt.Errorf("instrument (%s): %w", notes, err)
	}
	return in, notes, nil
}

// first returns the value of the highest source in order that sets the
// field, recording the source in notes, else def (recorded as the default).
func first[T any](ps [5]*Partial, order []Source, notes Notes, key string, field func(*Partial) Opt[T], def T) T {
	for _, src := range order {
		if v, ok := field(ps[src]).Get(); ok {
			notes[key] = src
			return v
		}
	}
	notes[key] = FromDefault
	return def
}

// resolveDOverR0 sets in.DOverR0 from the highest source giving DOverR0 or
// R0 (see Resolve), else DefaultDOverR0.
func resolveDOverR0(in *Instrument, ps []*Partial, order []Source, notes Notes) error {
	in.DOverR0 = DefaultDOverR0
	notes["d_over_r0"] = FromDefault
	for _, src := range order {
		p := ps[src]
		if v, ok := p.DOverR0.Get(); ok {
			in.DOverR0, notes["d_over_r0"] = v, src
			return nil
		}
		r0, ok := p.R0.Get()
		if !ok {
			continue
		}
		lam := in.Telescope.Wavelength
		r0 *= math.Pow(lam/p.R0Wavelength.Or(lam), 6.0/5)
		if !(r0 > 0) || math.IsInf(r0, 0) {
			return fmt.Errorf("the %s gives r0 = %g m at %g nm: want a positive finite r0", src, p.R0.V, p.R0Wavelength.Or(lam)*1e9)
		}
		in.DOverR0, notes["d_over_r0"] = in.Telescope.Diameter/r0, src
		return nil
	}
	return nil
}

func isAre(n int) string {
	if n == 1 {
		return "is"
	}
	return "are"
}

// Partial returns in as a Partial with every field set (for a source that
// is itself fully resolved, e.g. a simulation's own instrument).
func (in Instrument) Partial() Partial {
	t := in.Telescope
	return Partial{
		Site: Some(in.Site), Wavelength: Some(t.Wavelength), PixelScale: Some(t.PixelScale),
		Diameter: Some(t.Diameter), Obscuration: Some(t.Obscuration), Spiders: Some(t.Spiders),
		SpiderWidth: Some(t.SpiderWidth), FocalRatio: Some(t.FocalRatio),
		Diversity: Some(slices.Clone(in.Diversity)), Patch: Some(in.Patch), Modes: Some(in.Modes),
		Basis: Some(in.Basis), DOverR0: Some(in.DOverR0), OuterScale: Some(in.OuterScale),
	}
}

// TelescopeOf is a convenience for tests and callers holding an
// optics.Telescope: the Partial that sets its optical fields.
func TelescopeOf(t optics.Telescope) Partial {
	return Partial{
		Wavelength: Some(t.Wavelength), PixelScale: Some(t.PixelScale), Diameter: Some(t.Diameter),
		Obscuration: Some(t.Obscuration), Spiders: Some(t.Spiders), SpiderWidth: Some(t.SpiderWidth),
		FocalRatio: Some(t.FocalRatio),
	}
}

// Sizes returns the part of p that weights metadata contribute to Resolve:
// the patch, modes and basis (and the site name). The weights' optics
// describe what the network was made for, not the data: they are checked
// against the data's (Compatible), never taken for them.
func (p Partial) Sizes() Partial {
	return Partial{Patch: p.Patch, Modes: p.Modes, Basis: p.Basis}
}
