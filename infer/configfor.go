package infer

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"

	"pdwave/model/burst"
	"pdwave/model/modes"
	"pdwave/model/site"
)

// Overrides are explicit choices (command-line flags, trained weights) that
// take precedence over the site file and the burst header in ConfigFor. A
// zero (or negative) field means "not given"; callers reject negative flag
// values themselves.
type Overrides struct {
	Patch   int        // patch side N, pixels
	Modes   int        // number of modes, piston excluded
	Basis   modes.Kind // "" = not given
	DOverR0 float64    // expected D/r0 at the observing wavelength, for the prior
}

// ConfigFor returns the fit configuration for bursts of the given frame
// count whose header gives the optics o (zero fields = unknown), on site s
// (nil = no site file). It is the one place where site file, burst header
// and overrides are combined (the burst and site contracts of the README,
// "Burst files" and "Site file"):
//
//   - optics: wavelength, pixel scale, diameter, obscuration and diversity
//     from the header, else from the site (burst.Optics.Fill); the rest of the
//     telescope (focal ratio, spiders) from the site. Without a site file the
//     header must give wavelength, pixel scale, diameter and diversity, else
//     ConfigFor errors naming the missing keywords;
//   - patch, modes and basis: the override, else the site's sizes, else
//     DefaultConfig's (64 px, 36 KL modes);
//   - expected D/r0: the override, else D/r0 with the site's median r0 rescaled
//     from the site's wavelength to the burst's as λ^(6/5) (Roddier 1981,
//     Progress in Optics 19, 281), else DefaultConfig's 5 (common practice for
//     moderate daytime seeing);
//   - the basis aperture (modes.NewFor): the telescope's obscuration and
//     the site's outer scale over the diameter (Kolmogorov without a site);
//   - everything else (prior, metric, stopping rule) from DefaultConfig.
//
// ConfigFor neither validates the telescope nor checks the sampling:
// NewFitter (or optics.Telescope.CheckSampling) does.
func ConfigFor(s *site.Site, o burst.Optics, frames int, ov Overrides) (Config, error) {
	cfg := DefaultConfig()
	cfg.Frames = frames
	r0 := 0.0
	if s != nil {
		def := s.Optics()
		o = o.Fill(def)
		cfg.Telescope = s.Telescope()
		cfg.Patch, cfg.Modes, cfg.Basis = s.Sizes.Patch, s.Sizes.Modes, s.Sizes.Basis
		r0 = s.MedianR0() * math.Pow(o.Wavelength.V/def.Wavelength.V, 1.2)
		if !(r0 > 0) {
			return cfg, errors.New("the site file gives no r0")
		}
	} else {
		var missing []string
		for _, c := range []struct {
			v    float64
			name string
		}{{o.Wavelength.V, "wavelength (WAVELNTH)"}, {o.PixelScale.V, "pixel scale (CDELT1)"}, {o.Diameter.V, "diameter (TELDIAM)"}, {o.DiversityPV.V, "diversity (DIVPV)"}} {
			if !(c.v > 0) {
				missing = append(missing, c.name)
			}
		}
		if len(missing) > 0 {
			return cfg, fmt.Errorf("the burst header lacks %s and there is no site file", strings.Join(missing, ", "))
		}
	}
	tel := &cfg.Telescope
	tel.Wavelength, tel.PixelScale, tel.Diameter, tel.Obscuration = o.Wavelength.V, o.PixelScale.V, o.Diameter.V, o.Obscuration.V
	cfg.DiversityPV = []float64{0, o.DiversityPV.V}
	if r0 > 0 {
		cfg.DOverR0 = tel.Diameter / r0
	}
	cfg.Aperture = modes.Aperture{Obscuration: tel.Obscuration}
	if s != nil && s.OuterScale() > 0 && tel.Diameter > 0 {
		cfg.Aperture.OuterScale = max(s.OuterScale()/tel.Diameter, modes.MinOuterScale)
	}
	if ov.Patch > 0 {
		cfg.Patch = ov.Patch
	}
	if ov.Modes > 0 {
		cfg.Modes = ov.Modes
	}
	if ov.Basis != "" {
		cfg.Basis = ov.Basis
	}
	if ov.DOverR0 > 0 {
		cfg.DOverR0 = ov.DOverR0
	}
	return cfg, nil
}

// Settings describes the configuration for provenance (FITS HISTORY cards
// via fits.Provenance, "# key: value" lines of a coefficient CSV): basis,
// modes, frames, iterations, prior, d_over_r0, diversity (waves PV of the
// second channel), wavelength (nm), pixel_scale (arcsec), diameter (m) and
// obscuration, as text with units. The caller adds its own keys (command,
// input files, patch position).
func (c Config) Settings() map[string]string {
	div := 0.0
	if len(c.DiversityPV) > 1 {
		div = c.DiversityPV[1]
	}
	g6 := func(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }
	return map[string]string{
		"basis":       string(c.Basis),
		"basis_for":   apertureText(c.Aperture),
		"modes":       strconv.Itoa(c.Modes),
		"frames":      strconv.Itoa(c.Frames),
		"iterations":  strconv.Itoa(c.Stop.Iterations),
		"prior":       strconv.FormatFloat(c.Prior, 'g', -1, 64),
		"d_over_r0":   g6(c.DOverR0),
		"diversity":   g6(div) + " waves PV",
		"wavelength":  g6(c.Telescope.Wavelength*1e9) + " nm",
		"pixel_scale": g6(c.Telescope.PixelScale*206264.806) + " arcsec",
		"diameter":    g6(c.Telescope.Diameter) + " m",
		"obscuration": g6(c.Telescope.Obscuration),
	}
}

// apertureText describes the aperture a basis is built for, for provenance.
func apertureText(a modes.Aperture) string {
	t := "obscuration " + strconv.FormatFloat(a.Obscuration, 'g', 6, 64)
	if a.Kolmogorov() {
		return t + ", Kolmogorov"
	}
	return t + ", L0/D " + strconv.FormatFloat(a.OuterScale, 'g', 6, 64)
}
