package fits

import (
	"encoding/binary"
	"fmt"
	"math"
)

// Compressed reports whether h is a tile-compressed image: a binary table
// with ZIMAGE = T (FITS Standard 4.0 §10.1).
func (h *Unit) Compressed() bool {
	if h.Xtension != "BINTABLE" {
		return false
	}
	z, _ := h.Header.Bool("ZIMAGE")
	return z
}

// IsImage reports whether h holds image data: a primary or IMAGE HDU, or a
// tile-compressed image. The image may be empty (NAXIS = 0).
func (h *Unit) IsImage() bool {
	return h.Index == 0 || h.Xtension == "IMAGE" || h.Compressed()
}

// ImageAxes returns the axis lengths of the image h holds, NAXIS1 first:
// NAXISn of an image HDU, ZNAXISn of a tile-compressed image (§10.1.1).
// It errors for other HDUs and for a compressed image with invalid ZNAXISn.
// An empty image has no axes or a zero axis.
func (h *Unit) ImageAxes() ([]int, error) {
	switch {
	case h.Compressed():
		z, err := h.zimage()
		if err != nil {
			return nil, err
		}
		return z.axes, nil
	case h.IsImage():
		return h.Axes, nil
	}
	return nil, fmt.Errorf("%s %v", h.what(), errNoImage)
}

// Empty reports whether h holds no image pixels (not an image, NAXIS = 0, a
// zero axis, or a compressed image whose axes cannot be read).
func (h *Unit) Empty() bool {
	ax, err := h.ImageAxes()
	if err != nil || len(ax) == 0 {
		return true
	}
	for _, n := range ax {
		if n == 0 {
			return true
		}
	}
	return false
}

// Image decodes the image h holds as float64 physical values, NAXIS1
// fastest: BZERO + BSCALE·stored for integer BITPIX (FITS Standard 4.0
// §5.3, eq. 3; BZERO absent = 0, BSCALE absent = 1), BLANK pixels (§5.2.2)
// as NaN, IEEE values as stored (§5.3). A tile-compressed image is
// decompressed (see the package documentation). The pixel count is checked
// against Limits.MaxBytes (8 bytes a pixel) before allocating. Errors name
// the HDU and the keyword.
func (h *Unit) Image() ([]float64, error) {
	if h.Compressed() {
		return h.decompress()
	}
	if !h.IsImage() {
		return nil, fmt.Errorf("%s %v", h.what(), errNoImage)
	}
	n, err := h.pixelCount(h.Axes)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", h.what(), err)
	}
	sc, err := readScaling(h.Header, h.Bitpix, "BZERO", "BSCALE", "BLANK")
	if err != nil {
		return nil, fmt.Errorf("%s: %w", h.what(), err)
	}
	raw, err := h.bytes()
	if err != nil {
		return nil, err
	}
	out := make([]float64, n)
	if err := decodeBig(out, raw, h.Bitpix, sc); err != nil {
		return nil, fmt.Errorf("%s: %w", h.what(), err)
	}
	return out, nil
}

// pixelCount returns the product of axes, checked against the limit.
func (h *Unit) pixelCount(axes []int) (int, error) {
	max := h.lim.maxBytes() / 8
	n := int64(1)
	if len(axes) == 0 {
		return 0, nil
	}
	for _, a := range axes {
		if a < 0 {
			return 0, fmt.Errorf("negative axis %d", a)
		}
		if a == 0 {
			return 0, nil
		}
		if int64(a) > max || n > max/int64(a) {
			return 0, fmt.Errorf("image %v is more than the limit of %d pixels (%d bytes as float64)", axes, max, h.lim.maxBytes())
		}
		n *= int64(a)
	}
	return int(n), nil
}

// scaling is the linear scaling and null value of integer pixels.
type scaling struct {
	zero, scale float64
	blank       int64
	hasBlank    bool
}

// readScaling reads the zero, scale and blank keywords of h (BZERO, BSCALE,
// BLANK for images; §5.3 and §5.2.2). BLANK applies to integer BITPIX only.
func readScaling(h *Header, bitpix int, zeroKey, scaleKey, blankKey string) (scaling, error) {
	sc := scaling{scale: 1}
	var err error
	var ok bool
	if sc.zero, _, err = h.Number(zeroKey); err != nil {
		return sc, err
	}
	if v, has, err := h.Number(scaleKey); err != nil {
		return sc, err
	} else if has {
		sc.scale = v
	}
	if bitpix > 0 {
		var b int
		if b, ok, err = h.Int(blankKey); err != nil {
			return sc, err
		}
		sc.blank, sc.hasBlank = int64(b), ok
	}
	return sc, nil
}

// decodeBig decodes len(out) big-endian values of BITPIX bitpix from raw
// into out, applying sc to integers.
func decodeBig(out []float64, raw []byte, bitpix int, sc scaling) error {
	w := bitpix / 8
	if w < 0 {
		w = -w
	}
	if w == 0 || len(raw) < len(out)*w {
		return fmt.Errorf("image data has %d bytes, want %d", len(raw), len(out)*w)
	}
	be := binary.BigEndian
	for i := range out {
		p := raw[i*w:]
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
			out[i] = float64(math.Float32frombits(be.Uint32(p)))
			continue
		case -64:
			out[i] = math.Float64frombits(be.Uint64(p))
			continue
		default:
			return fmt.Errorf("BITPIX = %d is not supported", bitpix)
		}
		out[i] = sc.apply(iv)
	}
	return nil
}

// apply returns the physical value of the stored integer v.
func (sc scaling) apply(v int64) float64 {
	if sc.hasBlank && v == sc.blank {
		return math.NaN()
	}
	return sc.zero + sc.scale*float64(v)
}

// Planes returns the number of 2-D planes (NAXIS1 × NAXIS2 images) of the
// image h holds: the product of its axes beyond the second (1 for a 2-D
// image, 0 for an empty one). It errors as ImageAxes does.
func (h *Unit) Planes() (int, error) {
	ax, err := h.ImageAxes()
	if err != nil {
		return 0, err
	}
	if len(ax) < 2 {
		return 0, fmt.Errorf("%s: a %d-D image has no planes", h.what(), len(ax))
	}
	n, err := h.pixelCount(ax[2:])
	if err != nil {
		return 0, fmt.Errorf("%s: %w", h.what(), err)
	}
	if len(ax) == 2 && ax[0] > 0 && ax[1] > 0 {
		n = 1
	}
	return n, nil
}

// ReadPlane decodes plane k (0-based, the axes beyond the second counted
// with NAXIS3 fastest) of the image h holds into dst, which must hold
// NAXIS1·NAXIS2 values, with the conversions of Image. Only that plane is
// read from the file (for a tile-compressed image, the tiles overlapping
// it). It errors on a plane outside the image or a dst of another length.
// ReadPlane keeps a buffer of one plane's bytes in h between calls and is
// not safe for concurrent use.
func (h *Unit) ReadPlane(k int, dst []float64) error {
	np, err := h.Planes()
	if err != nil {
		return err
	}
	ax, _ := h.ImageAxes()
	if k < 0 || k >= np {
		return fmt.Errorf("%s: plane %d outside the %d planes of the image", h.what(), k, np)
	}
	if len(dst) != ax[0]*ax[1] {
		return fmt.Errorf("%s: %d values for a %d×%d plane", h.what(), len(dst), ax[0], ax[1])
	}
	if h.Compressed() {
		return h.decompressPlane(k, dst)
	}
	sc, err := readScaling(h.Header, h.Bitpix, "BZERO", "BSCALE", "BLANK")
	if err != nil {
		return fmt.Errorf("%s: %w", h.what(), err)
	}
	w := h.Bitpix / 8
	if w < 0 {
		w = -w
	}
	n := len(dst) * w
	if k*n+n > h.size {
		return fmt.Errorf("%s: image data has %d bytes, plane %d needs %d", h.what(), h.size, k+1, k*n+n)
	}
	h.buf, err = h.src.readInto(h.buf, h.off+k*n, n)
	if err != nil {
		return fmt.Errorf("%s: %w", h.what(), err)
	}
	if err := decodeBig(dst, h.buf, h.Bitpix, sc); err != nil {
		return fmt.Errorf("%s: %w", h.what(), err)
	}
	if h.src.mem != nil {
		h.buf = nil // a slice of the file, not a buffer to keep
	}
	return nil
}
