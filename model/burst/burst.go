// Package burst holds a phase-diversity burst (two channels × frames of
// images) and maps it to and from FITS files, read and written with package
// fits.
//
// # Layouts read (contract version 1, keyword BURSTVER = 1)
//
// A burst is read from one file or several (ReadFiles, ReadRef with
// "a.fits+b.fits"):
//
//   - a 4-D image NAXIS1 = nx, NAXIS2 = ny, NAXIS3 = frames, NAXIS4 = 2
//     (channel 1 focused, channel 2 defocused) in any image HDU, plain or
//     tile-compressed;
//   - two one-channel images (3-D, or 2-D for one frame) of the same shape
//     in one file, one per HDU (as astropy writes one CompImageHDU per
//     channel);
//   - one-channel files, the focused channel's first, then as many of the
//     defocused channel (ReadPair for two);
//   - files each holding both channels of some frames, in frame order.
//
// Options.HDUs chooses the HDUs by EXTNAME or index; by default the first
// HDU with a non-empty image and, for a one-channel image, the next image
// HDU of the same shape not named OBJECT. Whole-file gzip and the
// tile-compression convention are handled by package fits, as are pixels of
// BITPIX −32, −64, 8, 16, 32 and 64 with BZERO/BSCALE (FITS Standard 4.0
// §5.3, eq. 3; cameras write unsigned 16-bit data as BITPIX 16 with BZERO
// = 32768). Undefined pixels (NaN, Inf, BLANK, ZBLANK) are filled with the
// median of their good neighbours and counted (FillUndefined,
// Burst.Masked, cards PDMASK1/PDMASK2); a frame with more than
// MaxBadFraction of them is refused with channel and frame.
//
// # Camera geometry
//
// Options.Geometry (from the site file's geometry section) turns each
// camera's stored image into one common orientation (Orientation:
// transpose, quarter turns, flips) and registers channel 2 to channel 1 by
// a known offset and magnification (resampled: Fourier shift, or Keys
// cubic convolution with a magnification; see Geometry). It is applied
// after calibration (Options.Calibrate) and filling, and recorded in the
// card PDGEOM, a HISTORY line and Burst.Geometry; a header already
// holding PDGEOM is not turned again. The header of an image in an extension is
// its own, completed by the primary header's cards for keywords it lacks.
// Write always writes a 4-D BITPIX −32 primary image.
//
// Optics keywords (unset in Optics where absent; an explicit 0 is set):
//
//	WAVELNTH  wavelength, in units given by WAVEUNIT: an integer power of
//	          ten exponent (−9 = nm, −10 = Ångström) or a unit string
//	          (nm, Angstrom, angstrom, AA, um, micron, mm, cm, m, pm; FITS
//	          Standard 4.0 §4.3). Without WAVEUNIT, WAVELNTH is read in
//	          metres; a value outside 10 nm – 1 mm is then an error (it is
//	          almost surely nm or Å). Written as nm, WAVEUNIT = −9.
//	CDELT1/2  pixel scale with CUNIT1/2 ('arcsec', 'arcmin', 'deg', 'mas',
//	          'rad'; absent = 'deg', the celestial default of Greisen &
//	          Calabretta 2002). |CDELT1| and |CDELT2| must agree to 1 %.
//	          Written in the unit of a carried CUNITi card, else 'arcsec';
//	          the sign of a carried CDELTi is kept. Without carried
//	          CTYPEi/CRPIXi/CRVALi, Write adds CTYPEi = 'XOFFSET'/'YOFFSET',
//	          CRPIXi at the image centre, CRVALi = 0.
//	TELDIAM   aperture diameter, m.
//	OBSCUR    central obscuration, fraction of the diameter.
//	DIVPV     defocus of channel 2, peak-to-valley waves.
//
// Header values are read as fits.ParseValue says (FITS Standard 4.0 §4.2);
// the reader's notes (lower-case exponents, repeated keywords, dropped
// cards) are in Burst.Notes. Every other header card except the structural
// ones (SIMPLE, BITPIX, NAXISn, EXTEND, BZERO, BSCALE, BLANK, EXTNAME,
// CHECKSUM, DATASUM, BURSTVER, the tile-compression keywords, ...) is kept
// in Burst.Cards in file order, including COMMENT and HISTORY, so outputs
// carry WCS (CTYPEi, CRPIXi, CRVALi, CDELTi, CUNITi, PCi_j), DATE-OBS,
// TELESCOP, OBJECT and the like. Cards that would make an output invalid
// are dropped with a note: HIERARCH and other non-standard names, complex,
// oversized integer and unparsable values, WCS cards of the wrong type or
// of an axis beyond the fourth, dates not in the ISO-8601 form of FITS
// Standard 4.0 §9.1.1.
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
	"strings"

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
	// Masked counts, per channel over all frames, the pixels the reader
	// filled: undefined pixels of the file (NaN, Inf, BLANK) and pixels a
	// Calibrator marked bad (see FillUndefined).
	Masked [2]int
	// Geometry is the camera geometry the reader applied
	// (Geometry.String), "" for none.
	Geometry string
	// Data16 holds the frames instead of Data when the burst was read
	// with Options.Quantise16 (Data16[channel][frame], each Nx·Ny); nil
	// otherwise. Validate, Patch and Write use Data only.
	Data16 [2][]Frame16

	src [2][]plane // the frames in their files while reading
}

// plane is frame k of a burst's image in a file.
type plane struct {
	u *fits.Unit
	k int
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
// CTYPE3/4, CDELT3/4, CRVAL3/4, CUNIT3/4, NAXIS3/4) are dropped, and so is
// the burst's COMMENT "Axes: ..." describing its 4-D axes. cards is not
// modified.
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
		case "COMMENT":
			if strings.HasPrefix(c.Comment, "Axes:") {
				continue // the burst's description of its 4-D axes
			}
		}
		out = append(out, c)
	}
	return out
}
