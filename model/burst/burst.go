// Package burst holds a phase-diversity burst (two channels × frames of
// images) and reads and writes it as FITS, plus a generic writer for the
// FITS products of the other verbs.
//
// # Burst file (contract version 1, keyword BURSTVER = 1)
//
// The primary HDU is a 4-D image: NAXIS1 = nx, NAXIS2 = ny, NAXIS3 = frames,
// NAXIS4 = 2 (channel 1 focused, channel 2 defocused). Read accepts BITPIX
// −32, −64, 8, 16, 32 and 64 and applies BZERO/BSCALE (physical = BZERO +
// BSCALE·stored, FITS Standard 4.0 §5.3, eq. 3); cameras write unsigned
// 16-bit data as BITPIX 16 with BZERO = 32768. Integer pixels equal to BLANK
// are undefined and rejected like NaN. Write always writes BITPIX −32.
// ReadPair reads one 3-D file (NAXIS1, NAXIS2, NAXIS3 = frames) per channel.
//
// Optics keywords (zero in Optics where absent):
//
//	WAVELNTH  wavelength, in units of 10^WAVEUNIT m. WAVEUNIT is the power of
//	          ten exponent (−9 = nm, −10 = Ångström). Without WAVEUNIT,
//	          WAVELNTH is read in metres; a value outside 10 nm – 1 mm is then
//	          an error (it is almost surely nm or Å). Written as nm, WAVEUNIT = −9.
//	CDELT1/2  pixel scale with CUNIT1/2 ('arcsec', 'arcmin', 'deg', 'mas',
//	          'rad'; absent = 'deg', the celestial default of Greisen &
//	          Calabretta 2002). |CDELT1| and |CDELT2| must agree to 1 %.
//	          Written in the unit of a carried CUNITi card, else 'arcsec';
//	          the sign of a carried CDELTi is kept.
//	TELDIAM   aperture diameter, m.
//	          Without carried CTYPEi/CRPIXi/CRVALi, Write adds CTYPEi =
//	          'XOFFSET'/'YOFFSET', CRPIXi at the image centre, CRVALi = 0.
//	OBSCUR    central obscuration, fraction of the diameter.
//	DIVPV     defocus of channel 2, peak-to-valley waves.
//
// Every other header card of the primary HDU except the structural ones
// (SIMPLE, BITPIX, NAXISn, EXTEND, BZERO, BSCALE, BLANK, EXTNAME, CHECKSUM,
// DATASUM, BURSTVER, ...) is kept in Burst.Cards in file order, including
// COMMENT and HISTORY, so outputs carry WCS (CTYPEi, CRPIXi, CRVALi, CDELTi,
// CUNITi, PCi_j), DATE-OBS, TELESCOP, OBJECT and the like. HIERARCH cards and
// cards with complex or oversized integer values are dropped.
//
// Simulated bursts add two extensions:
//
//	TRUTH   binary table, one row per frame; header BASIS ('zernike' or
//	        'kl') and NMODES; column COEFFS (NMODES doubles, rad, native
//	        basis) and, optionally, NOLL (the same wavefront as Noll
//	        Zernike coefficients j = 2.., rad).
//	OBJECT  image nx × ny, the true object.
//
// Written files pass fitsverify and read back in astropy (tests).
package burst

import (
	"fmt"
	"math"

	"pdwave/model/fits"
	"pdwave/model/instrument"
)

// Version is the burst file contract version written as BURSTVER. Read
// rejects files with a larger BURSTVER.
const Version = 1

// Optics are the optical parameters a burst file may carry. Each field is
// set only when the header gives the keyword: an explicit OBSCUR = 0 or
// DIVPV = 0 is set with value 0, never taken for "absent".
type Optics struct {
	Wavelength  instrument.Opt[float64] // m
	PixelScale  instrument.Opt[float64] // rad per pixel
	Diameter    instrument.Opt[float64] // aperture diameter, m
	Obscuration instrument.Opt[float64] // central obscuration, fraction of the diameter
	DiversityPV instrument.Opt[float64] // defocus of channel 2, peak-to-valley waves
}

// Fill returns o with every unset field taken from defaults: header values
// override the site file, which fills the rest. Set fields of o are kept
// even when zero.
func (o Optics) Fill(defaults Optics) Optics {
	f := func(v, d instrument.Opt[float64]) instrument.Opt[float64] {
		if v.Set {
			return v
		}
		return d
	}
	return Optics{
		Wavelength:  f(o.Wavelength, defaults.Wavelength),
		PixelScale:  f(o.PixelScale, defaults.PixelScale),
		Diameter:    f(o.Diameter, defaults.Diameter),
		Obscuration: f(o.Obscuration, defaults.Obscuration),
		DiversityPV: f(o.DiversityPV, defaults.DiversityPV),
	}
}

// Truth is the known wavefront of a simulated burst.
type Truth struct {
	Basis  string      // "zernike" or "kl"
	Modes  int         // modes per frame
	Coeffs [][]float64 // frames × Modes, rad, native basis
	Noll   [][]float64 // frames × Modes, rad, Noll Zernike j = 2..Modes+1; nil if not given
}

// Burst is a phase-diversity burst: two channels of Frames images, each
// Ny rows of Nx pixels, row-major (index y·Nx + x).
type Burst struct {
	Nx, Ny, Frames int
	Data           [2][][]float64 // Data[channel][frame], each Nx·Ny; channel 0 focused, 1 defocused
	Optics         Optics         // from header keywords (unset where absent)
	Cards          []fits.Card    // other header cards to carry over (WCS, DATE-OBS, ...)
	Truth          *Truth         // nil if absent
	Object         []float64      // nil if absent; Nx·Ny
	// Notes are remarks of the reader: departures from the FITS standard
	// it read through (FITS Standard 4.0 §4.2), repeated keywords, cards
	// dropped because they would make an output invalid. Callers show
	// them as warnings; Write ignores them.
	Notes []string
}

// New returns a burst with zeroed Data of the given size. It panics if a
// size is < 1.
func New(nx, ny, frames int) *Burst {
	if nx < 1 || ny < 1 || frames < 1 {
		panic(fmt.Sprintf("burst.New: sizes %d×%d×%d must be >= 1", nx, ny, frames))
	}
	b := &Burst{Nx: nx, Ny: ny, Frames: frames}
	for c := range b.Data {
		b.Data[c] = make([][]float64, frames)
		for f := range b.Data[c] {
			b.Data[c][f] = make([]float64, nx*ny)
		}
	}
	return b
}

// channelName names channel c (0-based) for messages.
func channelName(c int) string {
	if c == 0 {
		return "channel 1 (focused)"
	}
	return "channel 2 (defocused)"
}

// Validate checks that the sizes agree with the data and that every pixel
// is finite.
func (b *Burst) Validate() error {
	if b.Nx < 1 || b.Ny < 1 || b.Frames < 1 {
		return fmt.Errorf("burst size %d×%d with %d frames: all must be >= 1", b.Nx, b.Ny, b.Frames)
	}
	n := b.Nx * b.Ny
	for c := range b.Data {
		if len(b.Data[c]) != b.Frames {
			return fmt.Errorf("%s has %d frames, want %d", channelName(c), len(b.Data[c]), b.Frames)
		}
		for f, im := range b.Data[c] {
			if len(im) != n {
				return fmt.Errorf("%s frame %d has %d pixels, want %d×%d", channelName(c), f+1, len(im), b.Nx, b.Ny)
			}
			if err := checkFinite(im, b.Nx); err != nil {
				return fmt.Errorf("%s frame %d: %w", channelName(c), f+1, err)
			}
		}
	}
	if b.Object != nil && len(b.Object) != n {
		return fmt.Errorf("object has %d pixels, want %d×%d", len(b.Object), b.Nx, b.Ny)
	}
	if t := b.Truth; t != nil {
		if t.Modes < 1 {
			return fmt.Errorf("truth has %d modes", t.Modes)
		}
		if len(t.Coeffs) != b.Frames {
			return fmt.Errorf("truth has %d rows of coefficients for %d frames", len(t.Coeffs), b.Frames)
		}
		for f, row := range t.Coeffs {
			if len(row) != t.Modes {
				return fmt.Errorf("truth frame %d has %d coefficients, want %d", f+1, len(row), t.Modes)
			}
		}
		if t.Noll != nil {
			if len(t.Noll) != b.Frames {
				return fmt.Errorf("truth has %d rows of Noll coefficients for %d frames", len(t.Noll), b.Frames)
			}
			for f, row := range t.Noll {
				if len(row) != t.Modes {
					return fmt.Errorf("truth frame %d has %d Noll coefficients, want %d", f+1, len(row), t.Modes)
				}
			}
		}
	}
	return nil
}

func checkFinite(im []float64, nx int) error {
	for i, v := range im {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("pixel (x=%d, y=%d) is %v (undefined pixels are not allowed)", i%nx+1, i/nx+1, v)
		}
	}
	return nil
}

// Patch copies the n×n cut-out with first column x0 and first row y0 of
// every frame of both channels into new slices, returned as
// data[channel][frame] (row-major n×n, x fastest), the layout of
// infer.Fitter.Fit. It panics if the cut-out does not lie inside the
// Nx×Ny frames.
func (b *Burst) Patch(x0, y0, n int) [][][]float64 {
	if x0 < 0 || y0 < 0 || n < 1 || x0+n > b.Nx || y0+n > b.Ny {
		panic(fmt.Sprintf("burst: patch %d px at (%d, %d) outside the %d×%d frames", n, x0, y0, b.Nx, b.Ny))
	}
	data := make([][][]float64, 2)
	for c := range data {
		data[c] = make([][]float64, b.Frames)
		for f := range data[c] {
			im := make([]float64, n*n)
			src := b.Data[c][f]
			for r := 0; r < n; r++ {
				copy(im[r*n:(r+1)*n], src[(y0+r)*b.Nx+x0:(y0+r)*b.Nx+x0+n])
			}
			data[c][f] = im
		}
	}
	return data
}

// CutoutCards returns the carried header cards for a 2-D cut-out of the
// frames whose first column is x0 and first row y0 (0-based): the reference
// pixels CRPIX1 and CRPIX2 are moved by the offset (a non-numeric one is
// dropped), and the keywords of the third and fourth axes (CRPIX3/4,
// CTYPE3/4, CDELT3/4, CRVAL3/4, CUNIT3/4, NAXIS3/4) are dropped. cards is
// not modified.
func CutoutCards(cards []fits.Card, x0, y0 int) []fits.Card {
	out := make([]fits.Card, 0, len(cards))
	for _, c := range cards {
		switch c.Key {
		case "CRPIX1", "CRPIX2":
			v, ok := c.Float()
			if !ok {
				continue
			}
			if c.Key == "CRPIX1" {
				v -= float64(x0)
			} else {
				v -= float64(y0)
			}
			c.Value = v
		case "CRPIX3", "CRPIX4", "CTYPE3", "CTYPE4", "CDELT3", "CDELT4", "CRVAL3", "CRVAL4", "CUNIT3", "CUNIT4", "NAXIS3", "NAXIS4":
			continue // the product is 2-D
		}
		out = append(out, c)
	}
	return out
}
