package fits

import (
	"errors"
	"fmt"
	"regexp"
	"strconv"
)

// ErrNotFITS is returned (wrapped) when the bytes do not start a FITS file.
var ErrNotFITS = errors.New("not a FITS file (it does not begin with SIMPLE = T)")

// mandatoryRE matches the keywords that size a data unit; FITS Standard
// 4.0 §4.4.1 allows each only once.
var mandatoryRE = regexp.MustCompile(`^(SIMPLE|XTENSION|BITPIX|NAXIS[0-9]*|PCOUNT|GCOUNT|THEAP|GROUPS|TFIELDS|TFORM[0-9]+)$`)

// scanHDUs walks the HDU structure of a FITS file without decoding any
// data. It checks the mandatory keywords (FITS Standard 4.0 §4.4.1) far
// enough to know every data unit's size and verifies that each declared
// data unit lies inside the file, so later decoding never reads past it.
// Trailing bytes that do not start an extension are ignored (§3.5 allows
// special records after the last HDU). The last data unit may lack its
// block padding.
func scanHDUs(src *source, lim Limits) ([]*Unit, error) {
	if src.size == 0 {
		return nil, fmt.Errorf("empty file: %w", ErrNotFITS)
	}
	if src.size < cardSize {
		return nil, ErrNotFITS
	}
	if b, err := src.read(0, 9); err != nil {
		return nil, err
	} else if string(b) != "SIMPLE  =" {
		return nil, ErrNotFITS
	}
	var hdus []*Unit
	pos := 0
	for pos < src.size {
		idx := len(hdus)
		if idx > 0 {
			if src.size-pos < cardSize {
				break // padding after the last HDU
			}
			b, err := src.read(pos, 9)
			if err != nil {
				return nil, err
			}
			if string(b) != "XTENSION=" {
				break // special records or padding after the last HDU
			}
		}
		if idx >= lim.maxHDUs() {
			return nil, fmt.Errorf("more than %d HDUs", lim.maxHDUs())
		}
		h, end, err := scanOne(src, pos, idx, lim)
		if err != nil {
			return nil, err
		}
		hdus = append(hdus, h)
		pos = end
	}
	return hdus, nil
}

// scanOne reads the header starting at pos and sizes its data unit; it
// returns the HDU and the position after its padded data unit.
func scanOne(src *source, pos, idx int, lim Limits) (*Unit, int, error) {
	h := &Unit{Index: idx, lim: lim}
	what := h.what()
	hdr, err := readHeader(src, pos, what)
	if err != nil {
		return nil, 0, err
	}
	hdrEnd := pos + roundBlock(len(hdr))
	if hdrEnd > src.size {
		return nil, 0, fmt.Errorf("truncated file: the header of the %s is cut inside its last 2880-byte block", what)
	}
	h.Header = ParseHeader(hdr)
	if err := checkMandatoryOnce(h.Header, what); err != nil {
		return nil, 0, err
	}
	if err := h.identify(); err != nil {
		return nil, 0, err
	}
	pcount, gcount, err := h.readAxes()
	if err != nil {
		return nil, 0, err
	}
	size, err := dataSize(src.size, hdrEnd, h.Axes, h.Bitpix, pcount, gcount, h.what())
	if err != nil {
		return nil, 0, err
	}
	h.src, h.off, h.size = src, hdrEnd, size
	if src.mem != nil {
		h.data = src.mem[hdrEnd : hdrEnd+size : hdrEnd+size]
	}
	h.pcount = pcount
	return h, hdrEnd + roundBlock(size), nil
}

// readHeader returns the header starting at pos up to and including its
// END card, read a 2880-byte block at a time.
func readHeader(src *source, pos int, what string) ([]byte, error) {
	var hdr []byte
	for blk := pos; ; blk += blockSize {
		n := min(blockSize, src.size-blk)
		n -= n % cardSize
		if n <= 0 {
			return nil, fmt.Errorf("truncated file: the header of the %s has no END card", what)
		}
		b, err := src.read(blk, n)
		if err != nil {
			return nil, err
		}
		for p := 0; p < n; p += cardSize {
			if string(b[p:p+8]) == "END     " {
				if src.mem != nil {
					return src.mem[pos : blk+p+cardSize], nil
				}
				return append(hdr, b[:p+cardSize]...), nil
			}
		}
		if src.mem == nil {
			hdr = append(hdr, b...)
		}
		if n < blockSize {
			return nil, fmt.Errorf("truncated file: the header of the %s has no END card", what)
		}
	}
}

// checkMandatoryOnce refuses a header in which a keyword that sizes the
// data unit is given twice (FITS Standard 4.0 §4.4.1): which one counts
// would change how the rest of the file is read.
func checkMandatoryOnce(h *Header, what string) error {
	seen := map[string]bool{}
	for _, c := range h.Cards {
		if isCommentary(c.Key) || !mandatoryRE.MatchString(c.Key) {
			continue
		}
		if seen[c.Key] {
			return fmt.Errorf("%s: keyword %s appears twice", what, c.Key)
		}
		seen[c.Key] = true
	}
	return nil
}

// identify checks that the primary HDU says SIMPLE = T, or reads an
// extension's XTENSION type; it reads EXTNAME into h.Name.
func (h *Unit) identify() error {
	if h.Index == 0 {
		if v, _ := h.Header.Bool("SIMPLE"); !v {
			return ErrNotFITS
		}
	} else {
		x, ok, err := h.Header.String("XTENSION")
		if err != nil || !ok {
			return fmt.Errorf("%s: XTENSION has no string value", h.what())
		}
		h.Xtension = x
	}
	if n, ok, _ := h.Header.String("EXTNAME"); ok {
		h.Name = n
	}
	return nil
}

// readAxes reads BITPIX (FITS Standard 4.0 Table 8 values only) and
// NAXIS, NAXISn (0..999 axes, none negative) into h, and returns PCOUNT
// and GCOUNT (required in extensions; 0 and 1 for the primary HDU, where
// random groups are refused).
func (h *Unit) readAxes() (pcount, gcount int, err error) {
	what := h.what()
	bitpix, ok, err := h.Header.Int("BITPIX")
	if err != nil || !ok {
		return 0, 0, fmt.Errorf("%s: missing or invalid BITPIX", what)
	}
	switch bitpix {
	case 8, 16, 32, 64, -32, -64:
	default:
		return 0, 0, fmt.Errorf("%s: BITPIX = %d is not one of 8, 16, 32, 64, -32, -64 (FITS Standard 4.0 Table 8)", what, bitpix)
	}
	h.Bitpix = bitpix
	naxis, ok, err := h.Header.Int("NAXIS")
	if err != nil || !ok || naxis < 0 || naxis > 999 {
		return 0, 0, fmt.Errorf("%s: missing or invalid NAXIS (must be 0..999)", what)
	}
	h.Axes = make([]int, naxis)
	for i := range h.Axes {
		k := "NAXIS" + strconv.Itoa(i+1)
		n, ok, err := h.Header.Int(k)
		if err != nil || !ok || n < 0 {
			return 0, 0, fmt.Errorf("%s: missing or negative %s", what, k)
		}
		h.Axes[i] = n
	}
	pcount, gcount = 0, 1
	if h.Index > 0 {
		var ok1, ok2 bool
		pcount, ok1, _ = h.Header.Int("PCOUNT")
		gcount, ok2, _ = h.Header.Int("GCOUNT")
		if !ok1 || !ok2 || pcount < 0 || gcount < 0 {
			return 0, 0, fmt.Errorf("%s: missing or invalid PCOUNT/GCOUNT", what)
		}
	} else if g, _ := h.Header.Bool("GROUPS"); g && naxis > 0 && h.Axes[0] == 0 {
		return 0, 0, errors.New("random-groups files are not supported")
	}
	return pcount, gcount, nil
}

// dataSize returns the size in bytes of a data unit,
// |BITPIX|/8 · GCOUNT · (PCOUNT + NAXIS1·…·NAXISn) (FITS Standard 4.0
// eq. 2), bounded by the file length at every step so nothing overflows,
// and fails if it exceeds the bytes after the header (file length minus
// dataStart). A data unit may end without its block padding.
func dataSize(fileLen, dataStart int, naxis []int, bitpix, pcount, gcount int, what string) (int, error) {
	limit := fileLen
	have := fileLen - dataStart
	elems := 0
	if len(naxis) > 0 {
		elems = 1
		for _, n := range naxis {
			if n == 0 {
				elems = 0
				break
			}
		}
		for _, n := range naxis {
			if elems == 0 {
				break
			}
			if n > limit || elems > limit/n {
				return 0, truncated(what, have)
			}
			elems *= n
		}
	}
	if pcount > limit || elems > limit-pcount {
		return 0, truncated(what, have)
	}
	elems += pcount
	if elems > 0 && gcount > limit/elems {
		return 0, truncated(what, have)
	}
	elems *= gcount
	width := bitpix / 8
	if width < 0 {
		width = -width
	}
	if elems > limit/width {
		return 0, truncated(what, have)
	}
	size := elems * width
	if size > have {
		return 0, fmt.Errorf("truncated file: the %s declares %d data bytes but only %d follow its header", what, size, have)
	}
	return size, nil
}

// truncated reports a data unit larger than the have bytes after its
// header.
func truncated(what string, have int) error {
	return fmt.Errorf("truncated file: the %s declares more data than the %d bytes that follow its header", what, have)
}

// roundBlock rounds n up to a whole number of 2880-byte blocks.
func roundBlock(n int) int {
	return (n + blockSize - 1) / blockSize * blockSize
}
