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
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"math/big"
	"os"
	"reflect"
	"strconv"
	"strings"

	"github.com/astrogo/fitsio"
)

// Version is the burst file contract version written as BURSTVER. Read
// rejects files with a larger BURSTVER.
const Version = 1

// Optics are the optical parameters a burst file may carry. Zero means
// unknown.
type Optics struct {
	Wavelength  float64 // m
	PixelScale  float64 // rad per pixel
	Diameter    float64 // aperture diameter, m
	Obscuration float64 // central obscuration, fraction of the diameter
	DiversityPV float64 // defocus of channel 2, peak-to-valley waves
}

// Fill returns o with every zero field taken from defaults: header values
// override the site file, which fills the rest.
func (o Optics) Fill(defaults Optics) Optics {
	f := func(v, d float64) float64 {
		if v == 0 {
			return d
		}
		return v
	}
	return Optics{
		Wavelength:  f(o.Wavelength, defaults.Wavelength),
		PixelScale:  f(o.PixelScale, defaults.PixelScale),
		Diameter:    f(o.Diameter, defaults.Diameter),
		Obscuration: f(o.Obscuration, defaults.Obscuration),
		DiversityPV: f(o.DiversityPV, defaults.DiversityPV),
	}
}

// Card is one FITS header card. Key is the keyword (1–8 characters of
// A–Z, 0–9, '-', '_'). Value is nil (undefined), bool, an integer type,
// float32/float64 (finite) or string (printable ASCII; long strings are
// written with CONTINUE cards). For the commentary keywords COMMENT, HISTORY
// and "" the text is in Comment (long text is wrapped over several cards)
// and Value is ignored.
type Card struct {
	Key     string
	Value   any
	Comment string
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
	Optics         Optics         // from header keywords (zero where absent)
	Cards          []Card         // other header cards to carry over (WCS, DATE-OBS, ...)
	Truth          *Truth         // nil if absent
	Object         []float64      // nil if absent; Nx·Ny
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

// Read reads a 4-D burst file (see the package documentation). Errors name
// the file and the problem: not FITS, truncated, wrong NAXIS, one channel
// only, zero frames, NaN/Inf or BLANK pixels (with channel and frame),
// malformed TRUTH/OBJECT extensions. Read never panics on bad input.
func Read(path string) (*Burst, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("reading burst: %w", err)
	}
	b, err := decodeBurst(data)
	if err != nil {
		return nil, fmt.Errorf("reading burst %s: %w", path, err)
	}
	return b, nil
}

// ReadPair reads a burst stored as two 3-D files (NAXIS1 = nx, NAXIS2 = ny,
// NAXIS3 = frames; a 2-D file is one frame), the focused and the defocused
// channel. The sizes must match. Optics come from the focused file's
// header, filled from the defocused one's (which usually carries DIVPV);
// Cards, TRUTH and OBJECT come from the focused file.
func ReadPair(focused, defocused string) (*Burst, error) {
	var parts [2]*fitsFile
	var cubes [2][][]float64
	var dims [2][3]int
	for c, path := range []string{focused, defocused} {
		data, err := os.ReadFile(path)
		if err != nil {
			return nil, fmt.Errorf("reading burst %s: %w", channelName(c), err)
		}
		ff, planes, d, err := decodeChannel(data, c)
		if err != nil {
			return nil, fmt.Errorf("reading burst %s %s: %w", channelName(c), path, err)
		}
		parts[c], cubes[c], dims[c] = ff, planes, d
	}
	if dims[0] != dims[1] {
		return nil, fmt.Errorf("reading burst pair: %s is %d×%d with %d frames but %s is %d×%d with %d frames",
			focused, dims[0][0], dims[0][1], dims[0][2], defocused, dims[1][0], dims[1][1], dims[1][2])
	}
	b := &Burst{Nx: dims[0][0], Ny: dims[0][1], Frames: dims[0][2]}
	b.Data = [2][][]float64{cubes[0], cubes[1]}
	var opt [2]Optics
	for c := range parts {
		o, err := opticsFrom(parts[c].hdr)
		if err != nil {
			return nil, fmt.Errorf("reading burst %s: %w", []string{focused, defocused}[c], err)
		}
		opt[c] = o
	}
	b.Optics = opt[0].Fill(opt[1])
	b.Cards = carriedCards(parts[0].hdr)
	if err := parts[0].extensions(b); err != nil {
		return nil, fmt.Errorf("reading burst %s: %w", focused, err)
	}
	return b, nil
}

// fitsFile is a scanned file with its decoded primary HDU.
type fitsFile struct {
	data  []byte
	spans []hduSpan
	hdr   *fitsio.Header
	raw   []byte
}

// openFITS scans the structure and decodes the primary HDU with fitsio.
func openFITS(data []byte) (*fitsFile, error) {
	spans, err := scanHDUs(data)
	if err != nil {
		return nil, err
	}
	hdu, err := decodeSpan(data, spans[0])
	if err != nil {
		return nil, err
	}
	img, ok := hdu.(fitsio.Image)
	if !ok {
		return nil, errors.New("primary HDU is not an image")
	}
	return &fitsFile{data: data, spans: spans, hdr: hdu.Header(), raw: img.Raw()}, nil
}

// decodeSpan decodes one HDU with fitsio, converting a panic of the
// decoder on malformed input into an error.
func decodeSpan(data []byte, s hduSpan) (hdu fitsio.HDU, err error) {
	what := "primary HDU"
	if s.index > 0 {
		what = fmt.Sprintf("HDU %d", s.index+1)
	}
	defer func() {
		if r := recover(); r != nil {
			hdu, err = nil, fmt.Errorf("malformed %s: %v", what, r)
		}
	}()
	buf := data[s.start:min(s.end, len(data))]
	if len(buf) < s.end-s.start {
		// The last data unit may lack its block padding; pad it here.
		p := make([]byte, s.end-s.start)
		copy(p, buf)
		buf = p
	}
	f, err := fitsio.Open(bytes.NewReader(buf))
	if err != nil {
		return nil, fmt.Errorf("malformed %s: %w", what, err)
	}
	defer f.Close()
	if len(f.HDUs()) != 1 {
		return nil, fmt.Errorf("malformed %s", what)
	}
	return f.HDU(0), nil
}

// decodeBurst decodes a 4-D burst file held in memory.
func decodeBurst(data []byte) (*Burst, error) {
	ff, err := openFITS(data)
	if err != nil {
		return nil, err
	}
	if err := checkVersion(ff.hdr); err != nil {
		return nil, err
	}
	ax := ff.hdr.Axes()
	switch {
	case len(ax) == 3 || (len(ax) == 4 && ax[3] == 1):
		return nil, fmt.Errorf("the primary image has one channel only (NAXIS = %d, axes %v); a burst file needs NAXIS = 4 with NAXIS4 = 2 (focused, defocused); files with one channel each are read as a pair (restore --pairs F D)", len(ax), ax)
	case len(ax) != 4:
		return nil, fmt.Errorf("the primary image has NAXIS = %d (axes %v); a burst file needs NAXIS = 4: nx, ny, frames, 2 channels", len(ax), ax)
	case ax[3] != 2:
		return nil, fmt.Errorf("NAXIS4 = %d; a burst file has exactly 2 channels (focused, defocused)", ax[3])
	case ax[0] == 0 || ax[1] == 0:
		return nil, fmt.Errorf("the images are empty (NAXIS1 = %d, NAXIS2 = %d)", ax[0], ax[1])
	case ax[2] == 0:
		return nil, errors.New("NAXIS3 = 0: the burst has no frames")
	}
	nx, ny, frames := ax[0], ax[1], ax[2]
	pix, err := pixels(ff.hdr, ff.raw, nx*ny*frames*2)
	if err != nil {
		return nil, err
	}
	b := &Burst{Nx: nx, Ny: ny, Frames: frames}
	n := nx * ny
	for c := 0; c < 2; c++ {
		b.Data[c] = make([][]float64, frames)
		for f := 0; f < frames; f++ {
			// NAXIS3 (frame) varies faster than NAXIS4 (channel).
			k := c*frames + f
			im := pix[k*n : (k+1)*n : (k+1)*n]
			if err := checkFinite(im, nx); err != nil {
				return nil, fmt.Errorf("%s frame %d: %w", channelName(c), f+1, err)
			}
			b.Data[c][f] = im
		}
	}
	if b.Optics, err = opticsFrom(ff.hdr); err != nil {
		return nil, err
	}
	b.Cards = carriedCards(ff.hdr)
	if err := ff.extensions(b); err != nil {
		return nil, err
	}
	return b, nil
}

// decodeChannel decodes a 3-D (or 2-D) one-channel file.
func decodeChannel(data []byte, c int) (*fitsFile, [][]float64, [3]int, error) {
	var d [3]int
	ff, err := openFITS(data)
	if err != nil {
		return nil, nil, d, err
	}
	if err := checkVersion(ff.hdr); err != nil {
		return nil, nil, d, err
	}
	ax := ff.hdr.Axes()
	switch {
	case len(ax) == 4 && ax[3] == 2:
		return nil, nil, d, errors.New("this is a two-channel burst (NAXIS4 = 2); read it with Read, not ReadPair")
	case len(ax) == 4 && ax[3] == 1:
		ax = ax[:3]
	case len(ax) == 2:
		ax = append(ax[:2:2], 1)
	case len(ax) != 3:
		return nil, nil, d, fmt.Errorf("the primary image has NAXIS = %d (axes %v); one channel of a burst needs NAXIS = 3: nx, ny, frames", len(ax), ax)
	}
	if ax[0] == 0 || ax[1] == 0 {
		return nil, nil, d, fmt.Errorf("the images are empty (NAXIS1 = %d, NAXIS2 = %d)", ax[0], ax[1])
	}
	if ax[2] == 0 {
		return nil, nil, d, errors.New("NAXIS3 = 0: the channel has no frames")
	}
	d = [3]int{ax[0], ax[1], ax[2]}
	n := ax[0] * ax[1]
	pix, err := pixels(ff.hdr, ff.raw, n*ax[2])
	if err != nil {
		return nil, nil, d, err
	}
	planes := make([][]float64, ax[2])
	for f := range planes {
		planes[f] = pix[f*n : (f+1)*n : (f+1)*n]
		if err := checkFinite(planes[f], ax[0]); err != nil {
			return nil, nil, d, fmt.Errorf("%s frame %d: %w", channelName(c), f+1, err)
		}
	}
	return ff, planes, d, nil
}

func checkVersion(h *fitsio.Header) error {
	c := h.Get("BURSTVER")
	if c == nil {
		return nil
	}
	v, ok := Number(c.Value)
	if !ok {
		return fmt.Errorf("BURSTVER = %v is not a number", c.Value)
	}
	if v > Version {
		return fmt.Errorf("burst contract version BURSTVER = %v is newer than this program reads (%d)", v, Version)
	}
	return nil
}

// Number converts a numeric header value (float64, float32, int, int64 or
// int32, as read by fitsio or set in a Card) to float64. It reports false
// for any other type (strings, booleans, nil); it does not check for NaN or
// Inf.
func Number(v any) (float64, bool) {
	switch x := v.(type) {
	case float64:
		return x, true
	case float32:
		return float64(x), true
	case int:
		return float64(x), true
	case int64:
		return float64(x), true
	case int32:
		return float64(x), true
	}
	return 0, false
}

// Float returns the card's value as float64 if it is numeric (see Number).
func (c Card) Float() (float64, bool) { return Number(c.Value) }

func numberKey(h *fitsio.Header, key string) (float64, bool, error) {
	c := h.Get(key)
	if c == nil || c.Value == nil {
		return 0, false, nil
	}
	v, ok := Number(c.Value)
	if !ok || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, false, fmt.Errorf("keyword %s = %v is not a finite number", key, c.Value)
	}
	return v, true, nil
}

// pixels decodes n big-endian pixels of the image's BITPIX and applies
// BZERO/BSCALE (FITS Standard 4.0 §5.3); integer pixels equal to BLANK
// become NaN.
func pixels(h *fitsio.Header, raw []byte, n int) ([]float64, error) {
	bitpix := h.Bitpix()
	w := bitpix / 8
	if w < 0 {
		w = -w
	}
	if w == 0 || len(raw) < n*w {
		return nil, fmt.Errorf("image data has %d bytes, want %d", len(raw), n*w)
	}
	zero, _, err := numberKey(h, "BZERO")
	if err != nil {
		return nil, err
	}
	scale, ok, err := numberKey(h, "BSCALE")
	if err != nil {
		return nil, err
	}
	if !ok {
		scale = 1
	}
	blank, hasBlank := int64(0), false
	if c := h.Get("BLANK"); c != nil && bitpix > 0 {
		if v, ok := c.Value.(int); ok {
			blank, hasBlank = int64(v), true
		}
	}
	out := make([]float64, n)
	be := binary.BigEndian
	for i := range out {
		p := raw[i*w:]
		var v float64
		var iv int64
		switch bitpix {
		case 8:
			iv = int64(p[0])
		case 16:
			iv = int64(int16(be.Uint16(p)))
		case 32:
			iv = int64(int32(be.Uint32(p)))
		case 64:
			iv = int64(be.Uint64(p))
		case -32:
			v = float64(math.Float32frombits(be.Uint32(p)))
		case -64:
			v = math.Float64frombits(be.Uint64(p))
		default:
			return nil, fmt.Errorf("BITPIX = %d is not supported", bitpix)
		}
		if bitpix > 0 {
			if hasBlank && iv == blank {
				out[i] = math.NaN()
				continue
			}
			v = float64(iv)
		}
		out[i] = zero + scale*v
	}
	return out, nil
}

// angleUnits maps CUNITi values to radians (IAU units, Greisen & Calabretta
// 2002 Table 1).
var angleUnits = map[string]float64{
	"deg":    math.Pi / 180,
	"arcmin": math.Pi / (180 * 60),
	"arcsec": math.Pi / (180 * 3600),
	"mas":    math.Pi / (180 * 3600e3),
	"rad":    1,
}

// cunit returns the unit of axis i from the header ("deg" if absent).
func cunit(h *fitsio.Header, i int) (string, error) {
	c := h.Get("CUNIT" + strconv.Itoa(i))
	if c == nil || c.Value == nil {
		return "deg", nil
	}
	s, ok := c.Value.(string)
	if !ok {
		return "", fmt.Errorf("CUNIT%d = %v is not a string", i, c.Value)
	}
	s = strings.TrimSpace(s)
	if _, ok := angleUnits[s]; !ok {
		return "", fmt.Errorf("CUNIT%d = '%s' is not an angle unit this program knows (arcsec, arcmin, deg, mas, rad)", i, s)
	}
	return s, nil
}

// opticsFrom reads the optics keywords of the package documentation.
func opticsFrom(h *fitsio.Header) (Optics, error) {
	var o Optics
	if v, ok, err := numberKey(h, "WAVELNTH"); err != nil {
		return o, err
	} else if ok {
		exp := 0.0
		unitGiven := false
		if c := h.Get("WAVEUNIT"); c != nil && c.Value != nil {
			e, ok := Number(c.Value)
			if !ok || e != math.Trunc(e) || math.Abs(e) > 30 {
				return o, fmt.Errorf("WAVEUNIT = %v is not a power-of-ten exponent (e.g. -9 for nm)", c.Value)
			}
			exp, unitGiven = e, true
		}
		if exp < 0 {
			o.Wavelength = v / math.Pow(10, -exp) // exact for v = 600, exp = -9
		} else {
			o.Wavelength = v * math.Pow(10, exp)
		}
		if o.Wavelength < 1e-8 || o.Wavelength > 1e-3 {
			if !unitGiven {
				return o, fmt.Errorf("WAVELNTH = %v without WAVEUNIT is read as metres, which is not an optical wavelength; add WAVEUNIT = -9 (nm) or -10 (Angstrom)", v)
			}
			return o, fmt.Errorf("WAVELNTH = %v with WAVEUNIT = %v is %g m, outside 10 nm – 1 mm", v, exp, o.Wavelength)
		}
	}
	var scale [2]float64
	for i := 1; i <= 2; i++ {
		v, ok, err := numberKey(h, "CDELT"+strconv.Itoa(i))
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
		o.PixelScale = scale[0]
	case scale[0] > 0:
		o.PixelScale = scale[0]
	default:
		o.PixelScale = scale[1]
	}
	for _, k := range []struct {
		key string
		dst *float64
		lo  float64
		hi  float64
	}{
		{"TELDIAM", &o.Diameter, 0, math.Inf(1)},
		{"OBSCUR", &o.Obscuration, 0, 1},
		{"DIVPV", &o.DiversityPV, math.Inf(-1), math.Inf(1)},
	} {
		v, ok, err := numberKey(h, k.key)
		if err != nil {
			return o, err
		}
		if !ok {
			continue
		}
		if v < k.lo || v >= k.hi || (k.key == "TELDIAM" && v == 0) {
			return o, fmt.Errorf("keyword %s = %v is out of range", k.key, v)
		}
		*k.dst = v
	}
	return o, nil
}

// consumed keywords are read into Optics and rewritten from it.
var consumed = map[string]bool{"WAVELNTH": true, "WAVEUNIT": true, "TELDIAM": true, "OBSCUR": true, "DIVPV": true, "BURSTVER": true}

// headerCards lists every card of h in order. fitsio v0.3.0 exposes no
// card count and Header.Card panics past the end, which ends the loop.
func headerCards(h *fitsio.Header) (cards []fitsio.Card) {
	defer func() { recover() }()
	for i := 0; ; i++ {
		cards = append(cards, *h.Card(i))
	}
}

// carriedCards returns the cards of h that outputs should carry.
func carriedCards(h *fitsio.Header) []Card {
	var out []Card
	for _, c := range headerCards(h) {
		if c.Name == "END" || consumed[c.Name] || structuralRE.MatchString(c.Name) {
			continue
		}
		if isCommentary(c.Name) {
			out = append(out, Card{Key: c.Name, Comment: c.Comment})
			continue
		}
		if !keyRE.MatchString(c.Name) {
			continue // HIERARCH and other non-standard names
		}
		switch c.Value.(type) {
		case nil, bool, int, float64, string:
		case complex128, big.Int:
			continue
		default:
			continue
		}
		out = append(out, Card{Key: c.Name, Value: c.Value, Comment: c.Comment})
	}
	return out
}

// extensions reads the TRUTH and OBJECT extensions, if present, into b.
func (ff *fitsFile) extensions(b *Burst) error {
	for _, s := range ff.spans[1:] {
		switch strings.TrimSpace(s.extname) {
		case "TRUTH":
			t, err := ff.readTruth(s, b.Frames)
			if err != nil {
				return fmt.Errorf("TRUTH extension: %w", err)
			}
			b.Truth = t
		case "OBJECT":
			o, err := ff.readObject(s, b.Nx, b.Ny)
			if err != nil {
				return fmt.Errorf("OBJECT extension: %w", err)
			}
			b.Object = o
		}
	}
	return nil
}

func (ff *fitsFile) readObject(s hduSpan, nx, ny int) ([]float64, error) {
	if strings.TrimSpace(s.xtension) != "IMAGE" {
		return nil, fmt.Errorf("is a %s, want an IMAGE", s.xtension)
	}
	hdu, err := decodeSpan(ff.data, s)
	if err != nil {
		return nil, err
	}
	img, ok := hdu.(fitsio.Image)
	if !ok {
		return nil, errors.New("is not an image")
	}
	ax := img.Header().Axes()
	if len(ax) != 2 || ax[0] != nx || ax[1] != ny {
		return nil, fmt.Errorf("axes %v, want [%d %d]", ax, nx, ny)
	}
	o, err := pixels(img.Header(), img.Raw(), nx*ny)
	if err != nil {
		return nil, err
	}
	if err := checkFinite(o, nx); err != nil {
		return nil, err
	}
	return o, nil
}

// tformRepeat parses a binary-table TFORM "rT" into repeat count and type
// code (FITS Standard 4.0 §7.3.1).
func tformRepeat(form string) (int, byte, error) {
	form = strings.TrimSpace(form)
	i := 0
	for i < len(form) && form[i] >= '0' && form[i] <= '9' {
		i++
	}
	if i == len(form) {
		return 0, 0, fmt.Errorf("bad TFORM %q", form)
	}
	r := 1
	if i > 0 {
		var err error
		if r, err = strconv.Atoi(form[:i]); err != nil {
			return 0, 0, fmt.Errorf("bad TFORM %q", form)
		}
	}
	return r, form[i], nil
}

// readTruth reads the TRUTH binary table of the HDU s: the BASIS and NMODES
// keywords, one row per frame of the COEFFS column and, when present, of
// the NOLL column (each NMODES floating-point values, finite). Malformed
// tables give an error, never a panic.
func (ff *fitsFile) readTruth(s hduSpan, frames int) (*Truth, error) {
	tbl, err := ff.truthTable(s)
	if err != nil {
		return nil, err
	}
	h := tbl.Header()
	t, err := truthKeys(h)
	if err != nil {
		return nil, err
	}
	if int(tbl.NumRows()) != frames {
		return nil, fmt.Errorf("%d rows for %d frames", tbl.NumRows(), frames)
	}
	ax := h.Axes()
	if len(ax) != 2 || ax[0] < 1 {
		return nil, errors.New("bad table axes")
	}
	withNoll := false
	for _, name := range []string{"COEFFS", "NOLL"} {
		found, err := checkTruthColumn(tbl, name, t.Modes, ax[0])
		if err != nil {
			return nil, err
		}
		if !found && name == "COEFFS" {
			return nil, errors.New("column COEFFS is missing")
		}
		if name == "NOLL" {
			withNoll = found
		}
	}
	if err := readTruthRows(tbl, t, frames, withNoll); err != nil {
		return nil, err
	}
	if len(t.Coeffs) != frames {
		return nil, fmt.Errorf("read %d rows, want %d", len(t.Coeffs), frames)
	}
	return t, nil
}

// truthTable decodes the HDU s, which must be a binary table.
func (ff *fitsFile) truthTable(s hduSpan) (*fitsio.Table, error) {
	if strings.TrimSpace(s.xtension) != "BINTABLE" {
		return nil, fmt.Errorf("is a %s, want a BINTABLE", s.xtension)
	}
	hdu, err := decodeSpan(ff.data, s)
	if err != nil {
		return nil, err
	}
	tbl, ok := hdu.(*fitsio.Table)
	if !ok {
		return nil, errors.New("is not a binary table")
	}
	return tbl, nil
}

// truthKeys returns a Truth holding the BASIS (non-blank string) and
// NMODES (integer >= 1) keywords of the TRUTH header h.
func truthKeys(h *fitsio.Header) (*Truth, error) {
	t := &Truth{}
	if c := h.Get("BASIS"); c != nil {
		if v, ok := c.Value.(string); ok {
			t.Basis = strings.TrimSpace(v)
		}
	}
	if t.Basis == "" {
		return nil, errors.New("header keyword BASIS (string) is missing")
	}
	nm, ok, err := numberKey(h, "NMODES")
	if err != nil || !ok || nm < 1 || nm != math.Trunc(nm) {
		return nil, errors.New("header keyword NMODES (integer >= 1) is missing or invalid")
	}
	t.Modes = int(nm)
	return t, nil
}

// checkTruthColumn reports whether tbl has the column name and, if so,
// checks that its TFORM is modes floating-point values (D or E) that fit in
// a row of rowBytes bytes.
func checkTruthColumn(tbl *fitsio.Table, name string, modes, rowBytes int) (bool, error) {
	i := tbl.Index(name)
	if i < 0 {
		return false, nil
	}
	r, code, err := tformRepeat(tbl.Col(i).Format)
	if err != nil {
		return false, fmt.Errorf("column %s: %w", name, err)
	}
	if code != 'D' && code != 'E' {
		return false, fmt.Errorf("column %s has TFORM %q, want floating point (D or E)", name, tbl.Col(i).Format)
	}
	width := 8
	if code == 'E' {
		width = 4
	}
	if r != modes {
		return false, fmt.Errorf("column %s has %d values per row, NMODES = %d", name, r, modes)
	}
	if r > rowBytes/width {
		return false, fmt.Errorf("column %s (%d values) does not fit in a %d-byte row", name, r, rowBytes)
	}
	return true, nil
}

// readTruthRows appends every row of COEFFS (and, if withNoll, of NOLL) in
// tbl to t.Coeffs (t.Noll), t.Modes values each. A panic of the table
// reader on malformed data is returned as an error.
func readTruthRows(tbl *fitsio.Table, t *Truth, frames int, withNoll bool) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("malformed table: %v", r)
		}
	}()
	rows, err := tbl.Read(0, tbl.NumRows())
	if err != nil {
		return err
	}
	defer rows.Close()
	t.Coeffs = make([][]float64, 0, frames)
	if withNoll {
		t.Noll = make([][]float64, 0, frames)
	}
	for rows.Next() {
		m := map[string]any{"COEFFS": nil}
		if withNoll {
			m["NOLL"] = nil
		}
		if err := rows.Scan(&m); err != nil {
			return err
		}
		for _, name := range []string{"COEFFS", "NOLL"} {
			v, ok := m[name]
			if !ok || (name == "NOLL" && !withNoll) {
				continue
			}
			row, err := floats(v, t.Modes)
			if err != nil {
				return fmt.Errorf("column %s: %w", name, err)
			}
			if name == "COEFFS" {
				t.Coeffs = append(t.Coeffs, row)
			} else {
				t.Noll = append(t.Noll, row)
			}
		}
	}
	return nil
}

// floats converts a scanned table cell (array or scalar of a float kind)
// to n finite float64 values.
func floats(v any, n int) ([]float64, error) {
	rv := reflect.ValueOf(v)
	out := make([]float64, 0, n)
	switch rv.Kind() {
	case reflect.Array, reflect.Slice:
		for i := 0; i < rv.Len(); i++ {
			e := rv.Index(i)
			if e.Kind() != reflect.Float32 && e.Kind() != reflect.Float64 {
				return nil, fmt.Errorf("cell of %s, want floats", rv.Type())
			}
			out = append(out, e.Float())
		}
	case reflect.Float32, reflect.Float64:
		out = append(out, rv.Float())
	default:
		return nil, fmt.Errorf("cell of type %T, want floats", v)
	}
	if len(out) != n {
		return nil, fmt.Errorf("%d values, want %d", len(out), n)
	}
	for _, x := range out {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return nil, fmt.Errorf("value %v", x)
		}
	}
	return out, nil
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
func CutoutCards(cards []Card, x0, y0 int) []Card {
	out := make([]Card, 0, len(cards))
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
