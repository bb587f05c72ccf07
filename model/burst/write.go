package burst

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"pdwave/model/fits"
)

// Write writes b as a burst file (see the package documentation): a
// float32 4-D primary image with BURSTVER, the optics keywords, b.Cards
// and then prov (later cards with the same keyword replace earlier ones,
// so provenance wins over carried DATE), plus TRUTH and OBJECT extensions
// when b has them. b is validated first (sizes, finite pixels). The write
// is atomic as for WriteFile.
func Write(path string, b *Burst, prov []fits.Card) error {
	if b == nil {
		return fmt.Errorf("writing burst %s: nil burst", path)
	}
	if err := b.Validate(); err != nil {
		return fmt.Errorf("writing burst %s: %w", path, err)
	}
	n := b.Nx * b.Ny
	cube := make([]float64, 0, 2*b.Frames*n)
	for c := 0; c < 2; c++ {
		for f := 0; f < b.Frames; f++ {
			cube = append(cube, b.Data[c][f]...)
		}
	}
	cards, err := burstCards(b)
	if err != nil {
		return fmt.Errorf("writing burst %s: %w", path, err)
	}
	cards = append(cards, prov...)
	hdus := []fits.HDU{&fits.Image{Dims: []int{b.Nx, b.Ny, b.Frames, 2}, Data: cube, Cards: cards}}
	if t := b.Truth; t != nil {
		cols := []fits.Column{{Name: "COEFFS", Unit: "rad", Float: t.Coeffs}}
		if t.Noll != nil {
			cols = append(cols, fits.Column{Name: "NOLL", Unit: "rad", Float: t.Noll})
		}
		hdus = append(hdus, &fits.Table{Name: "TRUTH", Columns: cols, Cards: []fits.Card{
			{Key: "BASIS", Value: t.Basis, Comment: "basis of COEFFS (zernike or kl)"},
			{Key: "NMODES", Value: t.Modes, Comment: "modes per frame"},
			{Key: "COMMENT", Comment: "One row per frame. COEFFS: native basis, rad. NOLL: Noll Zernike j=2.., rad."},
		}})
	}
	if b.Object != nil {
		hdus = append(hdus, &fits.Image{Name: "OBJECT", Dims: []int{b.Nx, b.Ny}, Data: b.Object,
			Cards: []fits.Card{{Key: "COMMENT", Comment: "The true object of the simulation."}}})
	}
	if err := fits.WriteFile(path, hdus...); err != nil {
		return fmt.Errorf("writing burst: %w", err)
	}
	return nil
}

// burstCards returns the primary-header cards of b: BURSTVER, channel
// axis description, optics keywords (each set one; OBSCUR and DIVPV even
// when 0, wavelength, pixel scale and diameter only when positive) and the
// carried cards, with CDELT1/2
// written in the unit of a carried CUNITi (default arcsec) and keeping the
// sign of a carried CDELTi.
func burstCards(b *Burst) ([]fits.Card, error) {
	const axesNote = "Axes: x, y, frame, channel (1 focused, 2 defocused)."
	cards := []fits.Card{{Key: "BURSTVER", Value: Version, Comment: "pdwave burst file contract version"}}
	noted := false
	for _, c := range b.Cards {
		noted = noted || (c.Key == "COMMENT" && c.Comment == axesNote)
	}
	if !noted {
		cards = append(cards, fits.Card{Key: "COMMENT", Comment: axesNote})
	}
	units := map[int]string{}
	sign := map[int]float64{1: 1, 2: 1}
	for _, c := range b.Cards {
		for i := 1; i <= 2; i++ {
			if c.Key == "CUNIT"+strconv.Itoa(i) {
				if s, ok := c.Value.(string); ok {
					if _, known := angleUnits[strings.TrimSpace(s)]; known {
						units[i] = strings.TrimSpace(s)
					}
				}
			}
			if c.Key == "CDELT"+strconv.Itoa(i) {
				if v, ok := fits.Number(c.Value); ok && v < 0 {
					sign[i] = -1
				}
			}
		}
	}
	carried := b.Cards
	o := b.Optics
	scale := o.PixelScale.Set && o.PixelScale.V > 0
	if scale {
		// Drop carried CDELTi/CUNITi; they are rewritten from Optics.
		carried = make([]fits.Card, 0, len(b.Cards))
		for _, c := range b.Cards {
			if c.Key == "CDELT1" || c.Key == "CDELT2" || c.Key == "CUNIT1" || c.Key == "CUNIT2" {
				continue
			}
			carried = append(carried, c)
		}
	}
	if o.Wavelength.Set && o.Wavelength.V > 0 {
		cards = append(cards,
			fits.Card{Key: "WAVELNTH", Value: sig12(o.Wavelength.V * 1e9), Comment: "wavelength, units of 10**WAVEUNIT m"},
			fits.Card{Key: "WAVEUNIT", Value: -9, Comment: "wavelength unit is 10**-9 m (nm)"})
	}
	if scale {
		for i := 1; i <= 2; i++ {
			u := units[i]
			if u == "" {
				u = "arcsec"
			}
			k := strconv.Itoa(i)
			cards = append(cards,
				fits.Card{Key: "CDELT" + k, Value: sign[i] * sig12(o.PixelScale.V/angleUnits[u]), Comment: "pixel scale"},
				fits.Card{Key: "CUNIT" + k, Value: u})
		}
	}
	if scale && !hasWCS(carried) {
		// CDELTi alone makes fitsverify warn of an incomplete WCS; without a
		// carried WCS describe the axes as offsets from the image centre.
		for i, n := range []int{b.Nx, b.Ny} {
			k := strconv.Itoa(i + 1)
			cards = append(cards,
				fits.Card{Key: "CTYPE" + k, Value: []string{"XOFFSET", "YOFFSET"}[i], Comment: "offset from the image centre"},
				fits.Card{Key: "CRPIX" + k, Value: float64(n+1) / 2, Comment: "image centre"},
				fits.Card{Key: "CRVAL" + k, Value: 0.0})
		}
	}
	if o.Diameter.Set && o.Diameter.V > 0 {
		cards = append(cards, fits.Card{Key: "TELDIAM", Value: o.Diameter.V, Comment: "aperture diameter, m"})
	}
	if o.Obscuration.Set {
		cards = append(cards, fits.Card{Key: "OBSCUR", Value: o.Obscuration.V, Comment: "central obscuration, fraction of diameter"})
	}
	if o.DiversityPV.Set {
		cards = append(cards, fits.Card{Key: "DIVPV", Value: o.DiversityPV.V, Comment: "defocus of channel 2, waves peak-to-valley"})
	}
	for _, c := range cards {
		if f, ok := c.Value.(float64); ok && (math.IsNaN(f) || math.IsInf(f, 0)) {
			return nil, fmt.Errorf("optics keyword %s is %v", c.Key, f)
		}
	}
	return append(cards, carried...), nil
}

// hasWCS reports whether cards hold any of CTYPEi, CRPIXi, CRVALi for the
// two image axes.
func hasWCS(cards []fits.Card) bool {
	for _, c := range cards {
		switch c.Key {
		case "CTYPE1", "CTYPE2", "CRPIX1", "CRPIX2", "CRVAL1", "CRVAL2":
			return true
		}
	}
	return false
}

// sig12 rounds x to 12 significant digits, removing the noise of unit
// conversions (6e-7 m · 1e9 = 600.0000000000001 nm) so that values written
// from converted units are stable over repeated read/write cycles.
func sig12(x float64) float64 {
	y, err := strconv.ParseFloat(strconv.FormatFloat(x, 'g', 12, 64), 64)
	if err != nil {
		return x
	}
	return y
}
