package instrument

import (
	"errors"
	"fmt"
	"math"
	"strconv"

	"pdwave/model/modes"
	"pdwave/model/optics"
)

// Instrument is the resolved description of an instrument: every value is
// known. SI units (m, rad); the diversity in waves peak-to-valley.
type Instrument struct {
	// Site is the site or telescope name, for reports; may be empty.
	Site string
	// Telescope holds the aperture D, central obscuration, spider vanes,
	// focal ratio, wavelength λ and pixel scale p.
	Telescope optics.Telescope
	// Diversity is the defocus of each channel, waves peak-to-valley of
	// Noll Z4 over the pupil (optics.Pupil.Defocus); channel 0 first,
	// usually 0. Its length is the number of channels.
	Diversity []float64
	// Patch is the patch side N, pixels: the pupil grid is N×N.
	Patch int
	// Modes is the number of wavefront modes, piston excluded.
	Modes int
	// Basis is the modal basis (Zernike in Noll order or Karhunen–Loève).
	Basis modes.Kind
	// DOverR0 is the expected D/r0 at λ: it sets the prior variances
	// σ_m² = Variance_m·(D/r0)^(5/3) and the output scale σ_m.
	DOverR0 float64
	// OuterScale is the von Kármán outer scale L0, m; 0 means Kolmogorov
	// (infinite L0).
	OuterScale float64
}

// Channels returns the number of channels (len(Diversity)).
func (in Instrument) Channels() int { return len(in.Diversity) }

// SecondDiversity returns the defocus of channel 1, waves PV, or 0 with a
// single channel: the one number burst headers (DIVPV), site files and
// weight files carry.
func (in Instrument) SecondDiversity() float64 {
	if len(in.Diversity) < 2 {
		return 0
	}
	return in.Diversity[1]
}

// Aperture returns the pupil and turbulence a basis for this instrument is
// built for by modes.NewFor: the central obscuration and L0/D (at least
// modes.MinOuterScale; 0 = Kolmogorov).
func (in Instrument) Aperture() modes.Aperture {
	a := modes.Aperture{Obscuration: in.Telescope.Obscuration}
	if in.OuterScale > 0 && in.Telescope.Diameter > 0 {
		a.OuterScale = max(in.OuterScale/in.Telescope.Diameter, modes.MinOuterScale)
	}
	return a
}

// Limits on sizes, checked by Validate before anything is allocated.
const (
	MinPatch    = 8    // smallest patch side, px
	MaxPatch    = 4096 // largest patch side, px
	MaxModes    = 2000 // most modes
	MaxChannels = 8    // most channels
)

// Validate reports whether in is usable by every verb: a valid telescope
// whose sampling is at least Nyquist for the patch (optics.CheckSampling),
// 1 to MaxChannels channels with finite diversity, a patch side in
// [MinPatch, MaxPatch], 2 to MaxModes modes (at most the modes the patch
// can draw, N²/4), a known basis, a positive finite D/r0 and a finite
// non-negative outer scale.
func (in Instrument) Validate() error {
	if err := in.Telescope.Validate(); err != nil {
		return err
	}
	switch {
	case in.Patch < MinPatch || in.Patch > MaxPatch:
		return fmt.Errorf("patch size %d px, want %d to %d", in.Patch, MinPatch, MaxPatch)
	case in.Modes < 2 || in.Modes > MaxModes || in.Modes > in.Patch*in.Patch/4:
		return fmt.Errorf("%d modes, want 2 to %d (and at most N²/4 = %d for %d px patches)", in.Modes, MaxModes, in.Patch*in.Patch/4, in.Patch)
	case len(in.Diversity) < 1 || len(in.Diversity) > MaxChannels:
		return fmt.Errorf("%d channels, want 1 to %d", len(in.Diversity), MaxChannels)
	case !(in.DOverR0 > 0) || math.IsInf(in.DOverR0, 0):
		return fmt.Errorf("expected D/r0 %g, want a positive finite number", in.DOverR0)
	case !(in.OuterScale >= 0) || math.IsInf(in.OuterScale, 0):
		return fmt.Errorf("outer scale %g m, want a finite number ≥ 0 (0 = Kolmogorov)", in.OuterScale)
	}
	if _, err := modes.ParseKind(string(in.Basis)); err != nil {
		return err
	}
	for k, d := range in.Diversity {
		if math.IsNaN(d) || math.IsInf(d, 0) || math.Abs(d) > 1000 {
			return fmt.Errorf("diversity of channel %d is %g waves PV, want a finite number within ±1000", k, d)
		}
	}
	return in.Telescope.CheckSampling(in.Patch)
}

// NeedDiversity returns an error unless some channel differs in defocus
// from channel 0: phase diversity needs a second, differently focused
// channel (simulation and training do; a fit can run on one channel).
func (in Instrument) NeedDiversity() error {
	for _, d := range in.Diversity[min(1, len(in.Diversity)):] {
		if d != in.Diversity[0] {
			return nil
		}
	}
	return errors.New("phase diversity needs a second channel with a different defocus")
}

// Settings describes in for provenance, as text with units: the one format
// of FITS HISTORY cards and CSV "# key: value" lines. Keys: site, basis,
// basis_for, modes, patch, d_over_r0, diversity (waves PV per channel),
// wavelength (nm), pixel_scale (arcsec), diameter (m), obscuration,
// outer_scale (m, or "Kolmogorov").
func (in Instrument) Settings() map[string]string {
	t := in.Telescope
	div := ""
	for k, d := range in.Diversity {
		if k > 0 {
			div += ", "
		}
		div += g6(d)
	}
	l0 := "Kolmogorov"
	if in.OuterScale > 0 {
		l0 = g6(in.OuterScale) + " m"
	}
	return map[string]string{
		"site":        in.Site,
		"basis":       string(in.Basis),
		"basis_for":   ApertureText(in.Aperture()),
		"modes":       strconv.Itoa(in.Modes),
		"patch":       strconv.Itoa(in.Patch) + " px",
		"d_over_r0":   g6(in.DOverR0),
		"diversity":   div + " waves PV",
		"wavelength":  g6(t.Wavelength*1e9) + " nm",
		"pixel_scale": g6(t.PixelScale*optics.RadToArcsec) + " arcsec",
		"diameter":    g6(t.Diameter) + " m",
		"obscuration": g6(t.Obscuration),
		"outer_scale": l0,
	}
}

// ApertureText describes the aperture a basis is built for, for provenance.
func ApertureText(a modes.Aperture) string {
	t := "obscuration " + g6(a.Obscuration)
	if a.Kolmogorov() {
		return t + ", Kolmogorov"
	}
	return t + ", L0/D " + g6(a.OuterScale)
}

// g6 formats v with 6 significant digits.
func g6(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }
