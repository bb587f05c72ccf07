package burst

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"
)

// HDU is one header-data unit for WriteFile: *Image or *Table.
type HDU interface{ isHDU() }

// Image is an image HDU. Dims lists the axis lengths, NAXIS1 (fastest)
// first; Data holds their product of values, written as IEEE float32
// (BITPIX −32; NaN and ±Inf are written as such). Name is the EXTNAME
// (required for extensions, optional for the primary HDU). Cards are added
// after the structural keywords, which they may not override.
type Image struct {
	Name  string
	Dims  []int
	Data  []float64
	Cards []Card
}

// Table is a binary-table HDU (FITS Standard 4.0 §7.3) named Name
// (EXTNAME). Every column has the same number of rows.
type Table struct {
	Name    string
	Columns []Column // in table order
	Cards   []Card   // added after the structural keywords
}

// Column is one table column; exactly one of Float, Int, Text is non-nil.
// Float holds rows × repeat values (every row the same length, written as
// TFORM "rD"), Int one 64-bit integer per row ("1K"), Text one printable
// ASCII string per row ("wA", w the longest string, blank padded).
type Column struct {
	Name, Unit string
	Float      [][]float64
	Int        []int64
	Text       []string
}

func (*Image) isHDU() {}
func (*Table) isHDU() {}

// WriteFile writes a FITS file of the given HDUs; the first must be an
// *Image (the primary HDU), the rest *Image or *Table extensions with a
// Name. The file is written to "<path>.tmp-XXXX" in the same directory,
// synced and renamed to path, so path never holds partial output.
func WriteFile(path string, hdus ...HDU) error {
	if err := writeFile(path, hdus); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

func writeFile(path string, hdus []HDU) error {
	if len(hdus) == 0 {
		return errors.New("no HDUs to write")
	}
	units := make([]dataUnit, 0, len(hdus))
	for i, h := range hdus {
		var u dataUnit
		var err error
		switch h := h.(type) {
		case *Image:
			if h == nil {
				return fmt.Errorf("HDU %d is nil", i+1)
			}
			if i > 0 && h.Name == "" {
				return fmt.Errorf("image extension %d has no Name (EXTNAME)", i+1)
			}
			u, err = encodeImage(h, i == 0, len(hdus) > 1)
		case *Table:
			if h == nil {
				return fmt.Errorf("HDU %d is nil", i+1)
			}
			if i == 0 {
				return errors.New("the primary HDU must be an *Image, not a table")
			}
			if h.Name == "" {
				return fmt.Errorf("table extension %d has no Name (EXTNAME)", i+1)
			}
			u, err = encodeTable(h)
		default:
			return fmt.Errorf("HDU %d has unsupported type %T", i+1, h)
		}
		if err != nil {
			return err
		}
		units = append(units, u)
	}
	return writeAtomic(path, units)
}

// Write writes b as a burst file (see the package documentation): a
// float32 4-D primary image with BURSTVER, the optics keywords, b.Cards
// and then prov (later cards with the same keyword replace earlier ones,
// so provenance wins over carried DATE), plus TRUTH and OBJECT extensions
// when b has them. b is validated first (sizes, finite pixels). The write
// is atomic as for WriteFile.
func Write(path string, b *Burst, prov []Card) error {
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
	hdus := []HDU{&Image{Dims: []int{b.Nx, b.Ny, b.Frames, 2}, Data: cube, Cards: cards}}
	if t := b.Truth; t != nil {
		cols := []Column{{Name: "COEFFS", Unit: "rad", Float: t.Coeffs}}
		if t.Noll != nil {
			cols = append(cols, Column{Name: "NOLL", Unit: "rad", Float: t.Noll})
		}
		hdus = append(hdus, &Table{Name: "TRUTH", Columns: cols, Cards: []Card{
			{Key: "BASIS", Value: t.Basis, Comment: "basis of COEFFS (zernike or kl)"},
			{Key: "NMODES", Value: t.Modes, Comment: "modes per frame"},
			{Key: "COMMENT", Comment: "One row per frame. COEFFS: native basis, rad. NOLL: Noll Zernike j=2.., rad."},
		}})
	}
	if b.Object != nil {
		hdus = append(hdus, &Image{Name: "OBJECT", Dims: []int{b.Nx, b.Ny}, Data: b.Object,
			Cards: []Card{{Key: "COMMENT", Comment: "The true object of the simulation."}}})
	}
	if err := writeFile(path, hdus); err != nil {
		return fmt.Errorf("writing burst %s: %w", path, err)
	}
	return nil
}

// burstCards returns the primary-header cards of b: BURSTVER, channel
// axis description, optics keywords and the carried cards, with CDELT1/2
// written in the unit of a carried CUNITi (default arcsec) and keeping the
// sign of a carried CDELTi.
func burstCards(b *Burst) ([]Card, error) {
	const axesNote = "Axes: x, y, frame, channel (1 focused, 2 defocused)."
	cards := []Card{{Key: "BURSTVER", Value: Version, Comment: "pdwave burst file contract version"}}
	noted := false
	for _, c := range b.Cards {
		noted = noted || (c.Key == "COMMENT" && c.Comment == axesNote)
	}
	if !noted {
		cards = append(cards, Card{Key: "COMMENT", Comment: axesNote})
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
				if v, ok := Number(c.Value); ok && v < 0 {
					sign[i] = -1
				}
			}
		}
	}
	carried := b.Cards
	o := b.Optics
	if o.PixelScale != 0 {
		// Drop carried CDELTi/CUNITi; they are rewritten from Optics.
		carried = make([]Card, 0, len(b.Cards))
		for _, c := range b.Cards {
			if c.Key == "CDELT1" || c.Key == "CDELT2" || c.Key == "CUNIT1" || c.Key == "CUNIT2" {
				continue
			}
			carried = append(carried, c)
		}
	}
	if o.Wavelength != 0 {
		cards = append(cards,
			Card{Key: "WAVELNTH", Value: sig12(o.Wavelength * 1e9), Comment: "wavelength, units of 10**WAVEUNIT m"},
			Card{Key: "WAVEUNIT", Value: -9, Comment: "wavelength unit is 10**-9 m (nm)"})
	}
	if o.PixelScale != 0 {
		for i := 1; i <= 2; i++ {
			u := units[i]
			if u == "" {
				u = "arcsec"
			}
			k := strconv.Itoa(i)
			cards = append(cards,
				Card{Key: "CDELT" + k, Value: sign[i] * sig12(o.PixelScale/angleUnits[u]), Comment: "pixel scale"},
				Card{Key: "CUNIT" + k, Value: u})
		}
	}
	if o.PixelScale != 0 && !hasWCS(carried) {
		// CDELTi alone makes fitsverify warn of an incomplete WCS; without a
		// carried WCS describe the axes as offsets from the image centre.
		for i, n := range []int{b.Nx, b.Ny} {
			k := strconv.Itoa(i + 1)
			cards = append(cards,
				Card{Key: "CTYPE" + k, Value: []string{"XOFFSET", "YOFFSET"}[i], Comment: "offset from the image centre"},
				Card{Key: "CRPIX" + k, Value: float64(n+1) / 2, Comment: "image centre"},
				Card{Key: "CRVAL" + k, Value: 0.0})
		}
	}
	if o.Diameter != 0 {
		cards = append(cards, Card{Key: "TELDIAM", Value: o.Diameter, Comment: "aperture diameter, m"})
	}
	if o.Obscuration != 0 {
		cards = append(cards, Card{Key: "OBSCUR", Value: o.Obscuration, Comment: "central obscuration, fraction of diameter"})
	}
	if o.DiversityPV != 0 {
		cards = append(cards, Card{Key: "DIVPV", Value: o.DiversityPV, Comment: "defocus of channel 2, waves peak-to-valley"})
	}
	for _, c := range cards {
		if f, ok := c.Value.(float64); ok && (math.IsNaN(f) || math.IsInf(f, 0)) {
			return nil, fmt.Errorf("optics keyword %s is %v", c.Key, f)
		}
	}
	return append(cards, carried...), nil
}

// Provenance returns header cards recording what wrote a file:
// PDWVERS = version, DATE = the current UTC time (FITS Standard 4.0
// §4.4.2.1 format 'YYYY-MM-DDThh:mm:ss'), and one HISTORY card per setting,
// "pdwave: key = value", in key order (long values wrap over further
// HISTORY cards). Non-ASCII characters are written as '?'.
func Provenance(version string, settings map[string]string) []Card {
	cards := []Card{
		{Key: "PDWVERS", Value: printable(version), Comment: "pdwave version that wrote this file"},
		{Key: "DATE", Value: time.Now().UTC().Format("2006-01-02T15:04:05"), Comment: "file creation date (UTC)"},
	}
	keys := make([]string, 0, len(settings))
	for k := range settings {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		cards = append(cards, Card{Key: "HISTORY", Comment: "pdwave: " + k + " = " + settings[k]})
	}
	return cards
}

// hasWCS reports whether cards hold any of CTYPEi, CRPIXi, CRVALi for the
// two image axes.
func hasWCS(cards []Card) bool {
	for _, c := range cards {
		switch c.Key {
		case "CTYPE1", "CTYPE2", "CRPIX1", "CRPIX2", "CRVAL1", "CRVAL2":
			return true
		}
	}
	return false
}
