package burst

import (
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"

	"pdwave/model/fits"
	"pdwave/model/instrument"
)

// Options choose where a burst file keeps its images.
type Options struct {
	// HDUs names the image HDUs: none = the first HDU holding a non-empty
	// image (plain or tile-compressed) and, if that image has one channel,
	// the next image HDU of the same shape (not named OBJECT) as the
	// defocused channel; one = the HDU holding the burst (or, in a file of
	// one channel, that channel); two = the focused and the defocused
	// channel's HDUs. Each is an EXTNAME or a 0-based HDU index (see
	// fits.File.Find).
	HDUs []string
	// Limits bound the memory one file may take (fits.Limits).
	Limits fits.Limits
	// Calibrate, if not nil, calibrates each channel's frames as stored,
	// before undefined pixels are filled and the geometry applied.
	Calibrate Calibrator
	// Geometry turns the channels into one orientation and registers
	// channel 2 to channel 1 (see Geometry); the zero Geometry changes
	// nothing. It is applied after calibration and filling, once: a
	// header holding PDGEOM is already oriented.
	Geometry Geometry
	// Quantise16, if true, stores each frame as 16-bit scaled integers
	// (Frame16) in Burst.Data16 and leaves Burst.Data nil: a quarter of
	// the memory of float64, as much as a 16-bit file, for readers of
	// large fields (restore). Every step before (calibration, filling,
	// geometry) is done in float64, a frame at a time; see Frame16 for the
	// precision.
	Quantise16 bool
}

// finish completes a burst just assembled from its files: the frames are
// read from the files a frame at a time (only one frame of the file is in
// memory at once besides the burst's own storage), calibrated
// (opt.Calibrate), their undefined and bad pixels filled (at most
// MaxBadFraction of a frame) and the camera geometry applied
// (opt.Geometry), in this order. It closes the files of parts. name is the
// burst's file or files, for errors.
func (b *Burst) finish(name string, parts []*part, opt Options) (*Burst, error) {
	defer closeParts(parts)
	if err := b.load(opt); err != nil {
		return nil, fmt.Errorf("reading burst %s: %w", name, err)
	}
	b.src = [2][]plane{}
	return b, nil
}

// closeParts closes the files the parts were read from.
func closeParts(parts []*part) {
	for _, p := range parts {
		if p != nil && p.file != nil {
			p.file.Close()
		}
	}
}

// Read reads the burst in the file at path with the default Options (see
// the package documentation for the layouts). Errors name the file and the
// problem: not FITS, truncated, wrong NAXIS, one channel only, zero frames,
// NaN/Inf or BLANK pixels (with channel and frame), malformed TRUTH/OBJECT
// extensions. Undefined pixels (NaN, Inf, BLANK) are filled
// (FillUndefined) and counted in Burst.Masked; a frame with more than
// MaxBadFraction of them is an error naming channel and frame. Read never
// panics on bad input.
func Read(path string) (*Burst, error) { return ReadFiles([]string{path}, Options{}) }

// ReadPair reads a burst stored as two one-channel files (NAXIS1 = nx,
// NAXIS2 = ny, NAXIS3 = frames; a 2-D file is one frame), the focused and
// the defocused channel. The sizes must match. Optics come from the
// focused file's header, filled from the defocused one's (which usually
// carries DIVPV); set values in both must agree. Cards, TRUTH and OBJECT
// come from the focused file.
func ReadPair(focused, defocused string) (*Burst, error) {
	return ReadPairWith(focused, defocused, Options{})
}

// ReadPairWith is ReadPair with reading options (the image HDUs of each
// file, limits).
func ReadPairWith(focused, defocused string, opt Options) (*Burst, error) {
	parts, err := readParts([]string{focused, defocused}, opt, true)
	if err != nil {
		return nil, err
	}
	for i, p := range parts {
		if len(p.planes) != 1 {
			closeParts(parts)
			return nil, fmt.Errorf("reading burst %s %s: this is a two-channel burst (NAXIS4 = 2); read it with Read, not ReadPair", channelName(i), p.path)
		}
	}
	b, err := assemble(parts)
	if err != nil {
		closeParts(parts)
		return nil, err
	}
	return b.finish(focused+" + "+defocused, parts, opt)
}

// ReadFiles reads one burst from one or more files, each read with opt
// (any of the layouts of the package documentation, plain, gzip- or
// tile-compressed):
//
//   - files that each hold both channels are frames of the burst, in the
//     order given (one file per frame, or several frames each);
//   - files that each hold one channel are split in two halves: the first
//     half the focused channel's files, the second half the defocused
//     channel's, the frames of each in the order given (two files: a
//     focused and a defocused file).
//
// Every file must have the same frame size; the focused and defocused
// channels the same number of frames; optics keywords given in several
// files must agree (to 1e-9 relative). The optics are those of the first
// file filled from the others; Cards and OBJECT come from the first file,
// TRUTH only from a single file. Errors name the file. The burst is then
// calibrated, its undefined pixels filled and its geometry applied as opt
// says (Options.Calibrate, Options.Geometry).
func ReadFiles(paths []string, opt Options) (*Burst, error) {
	parts, err := readParts(paths, opt, false)
	if err != nil {
		return nil, err
	}
	b, err := assemble(parts)
	if err != nil {
		closeParts(parts)
		return nil, err
	}
	return b.finish(strings.Join(paths, RefSep), parts, opt)
}

// part is what one file contributes to a burst.
type part struct {
	path   string
	nx, ny int
	axes   []int      // of the first image HDU
	planes [][]plane  // [channel in this file][frame]; 1 or 2 channels
	file   *fits.File // open until the frames are read
	optics Optics
	cards  []fits.Card
	notes  []string
	truth  *Truth
	object []float64
}

// readParts reads every file; pair names the files as channels in errors.
func readParts(paths []string, opt Options, pair bool) ([]*part, error) {
	if len(paths) == 0 {
		return nil, errors.New("reading burst: no files")
	}
	parts := make([]*part, len(paths))
	for i, p := range paths {
		pt, err := readPart(p, opt)
		if err != nil {
			closeParts(parts)
			if pair {
				return nil, fmt.Errorf("reading burst %s %s: %w", channelName(i), p, err)
			}
			return nil, fmt.Errorf("reading burst %s: %w", p, err)
		}
		parts[i] = pt
	}
	return parts, nil
}

// assemble joins the parts into one burst (see ReadFiles).
func assemble(parts []*part) (*Burst, error) {
	var chans [2][]*part
	switch two := len(parts[0].planes) == 2; {
	case len(parts) == 1 && !two:
		p := parts[0]
		return nil, fmt.Errorf("reading burst %s: the image has one channel only (NAXIS = %d, axes %v); %s", p.path, len(p.axes), p.axes, oneChannelMsg)
	case two:
		for _, p := range parts {
			if len(p.planes) != 2 {
				return nil, fmt.Errorf("reading burst: %s holds both channels but %s one only; give files of one kind", parts[0].path, p.path)
			}
		}
	default:
		for _, p := range parts {
			if len(p.planes) != 1 {
				return nil, fmt.Errorf("reading burst: %s holds one channel but %s both; give files of one kind", parts[0].path, p.path)
			}
		}
		if len(parts)%2 != 0 {
			return nil, fmt.Errorf("reading burst: %d one-channel files; give the focused channel's files, then as many of the defocused channel", len(parts))
		}
		chans[0], chans[1] = parts[:len(parts)/2], parts[len(parts)/2:]
	}
	if err := checkShapes(parts, chans); err != nil {
		return nil, err
	}
	b := &Burst{Nx: parts[0].nx, Ny: parts[0].ny}
	for _, p := range parts {
		if chans[0] == nil {
			b.src[0] = append(b.src[0], p.planes[0]...)
			b.src[1] = append(b.src[1], p.planes[1]...)
		}
		for _, n := range p.notes {
			b.Notes = append(b.Notes, filepath.Base(p.path)+": "+n)
		}
	}
	for c := range chans {
		for _, p := range chans[c] {
			b.src[c] = append(b.src[c], p.planes[0]...)
		}
	}
	b.Frames = len(b.src[0])
	var err error
	if b.Optics, err = agreeOptics(parts); err != nil {
		return nil, err
	}
	b.Cards, b.Object = parts[0].cards, parts[0].object
	if len(parts) == 1 || (len(parts) == 2 && chans[0] != nil) {
		b.Truth = parts[0].truth
	}
	return b, nil
}

const oneChannelMsg = "a burst file needs NAXIS = 4 with NAXIS4 = 2 (focused, defocused), or two image HDUs; files with one channel each are read as a pair (restore --pairs F D)"

// checkShapes checks that every part has the frame size of the first and,
// for one-channel files, that both channels have as many frames.
func checkShapes(parts []*part, chans [2][]*part) error {
	p0 := parts[0]
	if len(parts) == 2 && chans[0] != nil {
		p1 := parts[1]
		if p0.nx != p1.nx || p0.ny != p1.ny || len(p0.planes[0]) != len(p1.planes[0]) {
			return fmt.Errorf("reading burst pair: %s is %d×%d with %d frames but %s is %d×%d with %d frames",
				p0.path, p0.nx, p0.ny, len(p0.planes[0]), p1.path, p1.nx, p1.ny, len(p1.planes[0]))
		}
		return nil
	}
	for _, p := range parts[1:] {
		if p.nx != p0.nx || p.ny != p0.ny {
			return fmt.Errorf("reading burst: %s has %d×%d frames but %s %d×%d", p0.path, p0.nx, p0.ny, p.path, p.nx, p.ny)
		}
	}
	if chans[0] != nil {
		var n [2]int
		for c := range chans {
			for _, p := range chans[c] {
				n[c] += len(p.planes[0])
			}
		}
		if n[0] != n[1] {
			return fmt.Errorf("reading burst: the focused channel has %d frames in %d files, the defocused %d", n[0], len(chans[0]), n[1])
		}
	}
	return nil
}

// agreeOptics returns the optics of the first part filled from the others,
// and errors if two parts give different values for one keyword.
func agreeOptics(parts []*part) (Optics, error) {
	o := parts[0].optics
	fields := func(o *Optics) []struct {
		key string
		v   *instrument.Opt[float64]
	} {
		return []struct {
			key string
			v   *instrument.Opt[float64]
		}{{"WAVELNTH", &o.Wavelength}, {"CDELT1/2", &o.PixelScale}, {"TELDIAM", &o.Diameter}, {"OBSCUR", &o.Obscuration}, {"DIVPV", &o.DiversityPV}}
	}
	from := map[string]string{}
	for _, f := range fields(&o) {
		if f.v.Set {
			from[f.key] = parts[0].path
		}
	}
	for _, p := range parts[1:] {
		po := p.optics
		pf := fields(&po)
		for i, f := range fields(&o) {
			g := pf[i].v
			if !g.Set {
				continue
			}
			if !f.v.Set {
				*f.v, from[f.key] = *g, p.path
				continue
			}
			if math.Abs(f.v.V-g.V) > 1e-9*math.Max(math.Abs(f.v.V), math.Abs(g.V)) {
				return o, fmt.Errorf("reading burst: the optics differ: %s is %g in %s but %g in %s", f.key, f.v.V, from[f.key], g.V, p.path)
			}
		}
	}
	return o, nil
}

// readPart opens one file and reads its headers and extensions; the
// frames stay in the file (part.planes) until the burst is loaded.
func readPart(path string, opt Options) (*part, error) {
	f, err := fits.OpenFile(path, opt.Limits)
	if err != nil {
		return nil, err
	}
	p, err := decodeFile(path, f, opt)
	if err != nil {
		f.Close()
		return nil, err
	}
	p.file = f
	return p, nil
}

// decodePart decodes the bytes of the file path.
func decodePart(path string, data []byte, opt Options) (*part, error) {
	f, err := fits.Decode(data, opt.Limits)
	if err != nil {
		return nil, err
	}
	return decodeFile(path, f, opt)
}

// decodeFile reads the part the FITS file f at path holds.
func decodeFile(path string, f *fits.File, opt Options) (*part, error) {
	units, err := chooseImages(f, opt.HDUs)
	if err != nil {
		return nil, err
	}
	p := &part{path: path}
	hdrs := make([]*fits.Header, len(units))
	for i, u := range units {
		hdrs[i] = imageHeader(f, u)
		if err := checkVersion(hdrs[i]); err != nil {
			return nil, err
		}
	}
	if err := p.readPixels(units, opt.Limits); err != nil {
		return nil, err
	}
	var opts []Optics
	for _, h := range hdrs {
		o, err := opticsFrom(h)
		if err != nil {
			return nil, err
		}
		opts = append(opts, o)
	}
	p.optics = opts[0]
	if len(opts) == 2 {
		p.optics = opts[0].Fill(opts[1])
	}
	p.notes = append(p.notes, f.Notes()...)
	var dropped []string
	p.cards, dropped = carriedCards(hdrs[0])
	p.notes = append(p.notes, dropped...)
	if err := p.extensions(f); err != nil {
		return nil, err
	}
	return p, nil
}

// RefSep joins the files of one burst in a burst reference (see SplitRef).
const RefSep = "+"

// SplitRef returns the files of the burst reference ref: ref itself when
// it names an existing file or holds no RefSep, else its parts split at
// RefSep ("f1.fits+f2.fits" is the burst of two files, see ReadFiles).
func SplitRef(ref string) []string {
	if !strings.Contains(ref, RefSep) {
		return []string{ref}
	}
	if _, err := os.Stat(ref); err == nil {
		return []string{ref}
	}
	return strings.Split(ref, RefSep)
}

// ReadRef reads the burst named by the reference ref (SplitRef) with opt.
func ReadRef(ref string, opt Options) (*Burst, error) {
	return ReadFiles(SplitRef(ref), opt)
}

// FileExts are the file-name endings of FITS files a folder of bursts may
// hold (compared without case): plain, tile-compressed (.fz, as fpack
// names them) and gzip-compressed.
var FileExts = []string{".fits", ".fit", ".fts", ".fz", ".fits.gz", ".fit.gz", ".fts.gz"}

// IsFITSName reports whether a file name ends in one of FileExts.
func IsFITSName(name string) bool {
	name = strings.ToLower(name)
	for _, e := range FileExts {
		if strings.HasSuffix(name, e) {
			return true
		}
	}
	return false
}
