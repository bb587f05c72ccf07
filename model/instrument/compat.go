package instrument

import (
	"fmt"
	"math"
	"slices"
	"strings"
)

// Compatible reports whether weights made for w (their metadata as a
// Partial) can be applied to data taken with in: every value w sets must
// agree with in's — numbers within a relative 1e-3 (header values are
// rounded), the obscuration within 1e-3 absolute, patch, modes and basis
// exactly, the diversity channel by channel. Values w leaves unset are not
// checked. The error lists every difference, e.g. "wavelength 600 nm, the
// data has 500 nm". It is the one weights-compatibility check of pdwave.
func Compatible(w Partial, in Instrument) error {
	var diffs []string
	t := in.Telescope
	num := func(what string, o Opt[float64], have, unit float64, u string) {
		if v, ok := o.Get(); ok && !near(v, have) {
			diffs = append(diffs, fmt.Sprintf("%s %.4g%s, the data has %.4g%s", what, v/unit, u, have/unit, u))
		}
	}
	num("aperture diameter", w.Diameter, t.Diameter, 1, " m")
	num("wavelength", w.Wavelength, t.Wavelength, 1e-9, " nm")
	num("pixel scale", w.PixelScale, t.PixelScale, 1/206264.80624709636, " arcsec")
	if v, ok := w.Obscuration.Get(); ok && math.Abs(v-t.Obscuration) > 1e-3 {
		diffs = append(diffs, fmt.Sprintf("central obscuration %.3g, the data has %.3g", v, t.Obscuration))
	}
	if v, ok := w.Diversity.Get(); ok && !slices.EqualFunc(v, in.Diversity, near) {
		diffs = append(diffs, fmt.Sprintf("diversity %v waves PV, the data has %v", v, in.Diversity))
	}
	if v, ok := w.Patch.Get(); ok && v != in.Patch {
		diffs = append(diffs, fmt.Sprintf("patch size %d px, the data has %d px", v, in.Patch))
	}
	if v, ok := w.Basis.Get(); ok && !strings.EqualFold(string(v), string(in.Basis)) {
		diffs = append(diffs, fmt.Sprintf("basis %q, the request is %q", v, in.Basis))
	}
	if v, ok := w.Modes.Get(); ok && v != in.Modes {
		diffs = append(diffs, fmt.Sprintf("%d modes, the request is %d", v, in.Modes))
	}
	if len(diffs) == 0 {
		return nil
	}
	slices.Sort(diffs)
	site := w.Site.Or("")
	if site == "" {
		site = "an unnamed site"
	}
	return fmt.Errorf("weights were made for other optics (%s): %s", site, strings.Join(diffs, "; "))
}

// near reports whether a and b agree within a relative 1e-3 (or 1e-12
// absolute, for zeros).
func near(a, b float64) bool {
	d := math.Abs(a - b)
	return d <= 1e-3*math.Max(math.Abs(a), math.Abs(b)) || d <= 1e-12
}
