package burst

import (
	"fmt"
	"math"
	"regexp"
	"strconv"
	"strings"

	"pdwave/model/fits"
	"pdwave/model/instrument"
)

// angleUnits maps CUNITi values to radians (IAU units, Greisen & Calabretta
// 2002 Table 1).
var angleUnits = map[string]float64{
	"deg":    math.Pi / 180,
	"arcmin": math.Pi / (180 * 60),
	"arcsec": math.Pi / (180 * 3600),
	"mas":    math.Pi / (180 * 3600e3),
	"rad":    1,
}

// waveUnits maps WAVEUNIT strings to metres (the IAU-recommended unit
// strings of FITS Standard 4.0 §4.3, Table 3 and Table 4 prefixes, plus
// the spellings "micron" and "angstrom" that astropy also reads).
var waveUnits = map[string]float64{
	"m": 1, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "micron": 1e-6, "microns": 1e-6,
	"nm": 1e-9, "Angstrom": 1e-10, "angstrom": 1e-10, "AA": 1e-10, "pm": 1e-12,
}

// cunit returns the unit of axis i from the header ("deg" if absent).
func cunit(h *fits.Header, i int) (string, error) {
	s, ok, err := h.String("CUNIT" + strconv.Itoa(i))
	if err != nil {
		return "", err
	}
	if !ok {
		return "deg", nil
	}
	s = strings.TrimSpace(s)
	if _, ok := angleUnits[s]; !ok {
		return "", fmt.Errorf("CUNIT%d = '%s' is not an angle unit this program knows (arcsec, arcmin, deg, mas, rad)", i, s)
	}
	return s, nil
}

// waveUnit returns the metres per WAVELNTH unit given by WAVEUNIT: an
// integer power-of-ten exponent (−9 = nm, −10 = Ångström) or a unit string
// of waveUnits. given is false without WAVEUNIT.
func waveUnit(h *fits.Header) (perUnit float64, given bool, err error) {
	c, ok := h.Get("WAVEUNIT")
	if !ok || c.Value == nil {
		return 1, false, nil
	}
	if s, isStr := c.Value.(string); isStr {
		m, known := waveUnits[strings.TrimSpace(s)]
		if !known {
			return 0, true, fmt.Errorf("WAVEUNIT = '%s' is not a unit this program knows (nm, Angstrom, um, micron, mm, cm, m, pm, or a power-of-ten exponent such as -9)", s)
		}
		return m, true, nil
	}
	e, isNum := fits.Number(c.Value)
	if !isNum || e != math.Trunc(e) || math.Abs(e) > 30 {
		return 0, true, fmt.Errorf("WAVEUNIT = %v is not a power-of-ten exponent (e.g. -9 for nm) nor a unit string", c.Value)
	}
	if e < 0 {
		return 1 / math.Pow(10, -e), true, nil
	}
	return math.Pow(10, e), true, nil
}

// wavelength reads WAVELNTH with its WAVEUNIT, in metres. Without WAVEUNIT
// WAVELNTH is read in metres; a value outside 10 nm – 1 mm is an error.
func wavelength(h *fits.Header) (instrument.Opt[float64], error) {
	var o instrument.Opt[float64]
	v, ok, err := h.Number("WAVELNTH")
	if err != nil || !ok {
		return o, err
	}
	per, given, err := waveUnit(h)
	if err != nil {
		return o, err
	}
	w := v * per
	if per < 1 {
		w = v / (1 / per) // exact for v = 600 and nm
	}
	if w < 1e-8 || w > 1e-3 {
		if !given {
			return o, fmt.Errorf("WAVELNTH = %v without WAVEUNIT is read as metres, which is not an optical wavelength; add WAVEUNIT = -9 (nm) or -10 (Angstrom)", v)
		}
		c, _ := h.Get("WAVEUNIT")
		return o, fmt.Errorf("WAVELNTH = %v with WAVEUNIT = %v is %g m, outside 10 nm – 1 mm", v, c.Value, w)
	}
	return instrument.Some(w), nil
}

// pixelScale reads CDELT1/2 with CUNIT1/2, in rad per pixel.
func pixelScale(h *fits.Header) (instrument.Opt[float64], error) {
	var scale [2]float64
	var o instrument.Opt[float64]
	for i := 1; i <= 2; i++ {
		v, ok, err := h.Number("CDELT" + strconv.Itoa(i))
		if err != nil {
			return o, err
		}
		if !ok {
			continue
		}
		u, err := cunit(h, i)
		if err != nil {
			return o, err
		}
		scale[i-1] = math.Abs(v) * angleUnits[u]
		if scale[i-1] == 0 {
			return o, fmt.Errorf("CDELT%d = 0", i)
		}
	}
	switch {
	case scale[0] > 0 && scale[1] > 0:
		if math.Abs(scale[0]-scale[1]) > 0.01*scale[0] {
			return o, fmt.Errorf("pixels are not square: CDELT1 gives %.4g arcsec, CDELT2 %.4g arcsec", scale[0]/angleUnits["arcsec"], scale[1]/angleUnits["arcsec"])
		}
		return instrument.Some(scale[0]), nil
	case scale[0] > 0:
		return instrument.Some(scale[0]), nil
	case scale[1] > 0:
		return instrument.Some(scale[1]), nil
	}
	return o, nil
}

// opticsFrom reads the optics keywords of the package documentation. A
// keyword present with a value is set, even when the value is 0.
func opticsFrom(h *fits.Header) (Optics, error) {
	var o Optics
	var err error
	if o.Wavelength, err = wavelength(h); err != nil {
		return o, err
	}
	if o.PixelScale, err = pixelScale(h); err != nil {
		return o, err
	}
	for _, k := range []struct {
		key    string
		dst    *instrument.Opt[float64]
		lo, hi float64
	}{
		{"TELDIAM", &o.Diameter, 0, math.Inf(1)},
		{"OBSCUR", &o.Obscuration, 0, 1},
		{"DIVPV", &o.DiversityPV, math.Inf(-1), math.Inf(1)},
	} {
		v, ok, err := h.Number(k.key)
		if err != nil {
			return o, err
		}
		if !ok {
			continue
		}
		if v < k.lo || v >= k.hi || (k.key == "TELDIAM" && v == 0) {
			return o, fmt.Errorf("keyword %s = %v is out of range", k.key, v)
		}
		*k.dst = instrument.Some(v)
	}
	return o, nil
}

// consumed keywords are read into Optics and rewritten from it.
var consumed = map[string]bool{"WAVELNTH": true, "WAVEUNIT": true, "TELDIAM": true, "OBSCUR": true, "DIVPV": true, "BURSTVER": true, "INHERIT": true}

var (
	// wcsRE matches the WCS keywords of FITS Standard 4.0 §8.2 for an axis
	// (or pair of axes) by number; wcsNumRE are those whose value is a
	// number, the others (CTYPEi, CUNITi) are strings.
	wcsRE    = regexp.MustCompile(`^(CTYPE|CUNIT|CRPIX|CRVAL|CDELT|CROTA)([0-9]+)$|^(PC|CD)([0-9]+)_([0-9]+)$`)
	wcsNumRE = regexp.MustCompile(`^(CRPIX|CRVAL|CDELT|CROTA|PC|CD)`)
	// dateRE is the ISO-8601 form of FITS Standard 4.0 §9.1.1:
	// YYYY-MM-DD, optionally Thh:mm:ss[.s...].
	dateRE  = regexp.MustCompile(`^[0-9]{4}-(0[1-9]|1[0-2])-(0[1-9]|[12][0-9]|3[01])(T([01][0-9]|2[0-3]):[0-5][0-9]:([0-5][0-9]|60)(\.[0-9]+)?)?$`)
	dateKey = map[string]bool{"DATE": true, "DATE-OBS": true, "DATE-BEG": true, "DATE-END": true, "DATE-AVG": true, "DATE-REF": true}
)

// maxAxes is the number of axes of a burst file; WCS keywords of higher
// axes would be invalid in outputs.
const maxAxes = 4

// carriedCards returns the cards of h that outputs should carry and a note
// for each card left out because it would make an output invalid: keywords
// that are not standard names (HIERARCH), values that are complex, beyond
// 64 bits or not FITS values, WCS keywords of the wrong type or of an axis
// beyond the fourth, and dates not in the ISO-8601 form of FITS Standard
// 4.0 §9.1.1.
func carriedCards(h *fits.Header) (out []fits.Card, notes []string) {
	drop := func(c fits.Card, why string) {
		notes = append(notes, fmt.Sprintf("keyword %s = %v %s; not carried into outputs", c.Key, c.Value, why))
	}
	for _, c := range h.Cards {
		if consumed[c.Key] || fits.Structural(c.Key) {
			continue
		}
		if fits.IsCommentary(c.Key) {
			out = append(out, fits.Card{Key: c.Key, Comment: c.Comment})
			continue
		}
		if !fits.ValidKey(c.Key) {
			drop(c, "is not a standard keyword name (FITS Standard 4.0 §4.1.2.1)")
			continue
		}
		switch c.Value.(type) {
		case nil, bool, int, float64, string:
		default:
			drop(c, fmt.Sprintf("has a value (%T) outputs cannot hold", c.Value))
			continue
		}
		if why := invalidCard(c); why != "" {
			drop(c, why)
			continue
		}
		out = append(out, c)
	}
	return out, notes
}

// invalidCard returns why c would be invalid in an output, or "".
func invalidCard(c fits.Card) string {
	if m := wcsRE.FindStringSubmatch(c.Key); m != nil {
		for _, s := range []string{m[2], m[4], m[5]} {
			if n, err := strconv.Atoi(s); err == nil && (n < 1 || n > maxAxes) {
				return fmt.Sprintf("is a WCS keyword of axis %d, beyond the %d axes of a burst", n, maxAxes)
			}
		}
		_, isNum := fits.Number(c.Value)
		_, isStr := c.Value.(string)
		switch {
		case wcsNumRE.MatchString(c.Key) && !isNum:
			return "is a WCS keyword that must be a number (FITS Standard 4.0 §8.2)"
		case !wcsNumRE.MatchString(c.Key) && !isStr:
			return "is a WCS keyword that must be a string (FITS Standard 4.0 §8.2)"
		}
	}
	if dateKey[c.Key] {
		s, ok := c.Value.(string)
		if !ok || !dateRE.MatchString(strings.TrimSpace(s)) {
			return "is not an ISO-8601 date YYYY-MM-DD[Thh:mm:ss[.s]] (FITS Standard 4.0 §9.1.1)"
		}
	}
	return ""
}
