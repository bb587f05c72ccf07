package burst

import (
	"errors"
	"fmt"
	"regexp"
	"strconv"
	"strings"
)

// FITS Standard 4.0 (IAU FITS Working Group, 2016), §3.1 and §4: a file is
// a sequence of HDUs; each header is a whole number of 2880-byte blocks of
// 80-character cards ending with END, each data unit is padded to a whole
// number of blocks.
const (
	blockSize = 2880
	cardSize  = 80
)

// errNotFITS is returned (wrapped) when the bytes do not start a FITS file.
var errNotFITS = errors.New("not a FITS file (it does not begin with SIMPLE = T)")

// mandatoryRE matches the keywords that size a data unit; FITS Standard
// 4.0 §4.4.1 allows each only once.
var mandatoryRE = regexp.MustCompile(`^(SIMPLE|XTENSION|BITPIX|NAXIS[0-9]*|PCOUNT|GCOUNT|THEAP|GROUPS|TFIELDS|TFORM[0-9]+)$`)

// hduSpan locates one HDU in the raw bytes of a file.
type hduSpan struct {
	index     int    // 0 = primary
	start     int    // first byte of the header
	dataStart int    // first byte of the data unit
	dataEnd   int    // one past the last data byte (before padding)
	end       int    // one past the padded data unit; may exceed len(file) for the last HDU
	xtension  string // "" for the primary HDU
	extname   string
	bitpix    int
	naxis     []int
}

// scanHDUs walks the HDU structure of a FITS file without decoding any data.
// It checks the mandatory keywords (FITS Standard 4.0 §4.4.1) far enough to
// know every data unit's size and verifies that each declared data unit lies
// inside the file, so later decoding never allocates more than the file
// holds. Trailing bytes that do not start an extension are ignored (§3.5
// allows special records after the last HDU).
func scanHDUs(data []byte) ([]hduSpan, error) {
	if len(data) == 0 {
		return nil, fmt.Errorf("empty file: %w", errNotFITS)
	}
	if len(data) < cardSize || string(data[:9]) != "SIMPLE  =" {
		return nil, errNotFITS
	}
	var spans []hduSpan
	pos := 0
	for pos < len(data) {
		idx := len(spans)
		if idx > 0 {
			if len(data)-pos < cardSize || string(data[pos:pos+9]) != "XTENSION=" {
				break // special records or padding after the last HDU
			}
		}
		s, err := scanOne(data, pos, idx)
		if err != nil {
			return nil, err
		}
		spans = append(spans, s)
		pos = s.end
	}
	return spans, nil
}

// scanOne reads the header starting at pos and sizes its data unit.
func scanOne(data []byte, pos, idx int) (hduSpan, error) {
	s := hduSpan{index: idx, start: pos}
	what := "primary HDU"
	if idx > 0 {
		what = fmt.Sprintf("HDU %d", idx+1)
	}
	kv, p, err := scanCards(data, pos, what)
	if err != nil {
		return s, err
	}
	hdrEnd := pos + roundBlock(p-pos)
	if hdrEnd > len(data) {
		return s, fmt.Errorf("truncated file: the header of the %s is cut inside its last 2880-byte block", what)
	}
	s.dataStart = hdrEnd
	if what, err = s.identify(kv, what); err != nil {
		return s, err
	}
	pcount, gcount, err := s.readAxes(kv, what)
	if err != nil {
		return s, err
	}
	size, err := dataSize(len(data), s.dataStart, s.naxis, s.bitpix, pcount, gcount, what)
	if err != nil {
		return s, err
	}
	s.dataEnd = s.dataStart + size
	s.end = s.dataStart + roundBlock(size)
	return s, nil
}

// scanCards reads the cards of the header starting at pos up to END and
// returns the valued keywords (value fields unparsed; "HIERARCH KEY =
// value" stored as KEY) and the position just after the END card. A
// mandatory keyword given twice, or a header without END, is an error;
// what names the HDU in messages.
func scanCards(data []byte, pos int, what string) (map[string]string, int, error) {
	kv := map[string]string{}
	p := pos
	for {
		if p+cardSize > len(data) {
			return nil, p, fmt.Errorf("truncated file: the header of the %s has no END card", what)
		}
		card := data[p : p+cardSize]
		p += cardSize
		key := strings.TrimRight(string(card[:8]), " ")
		if key == "END" {
			return kv, p, nil
		}
		val, has := "", false
		if string(card[8:10]) == "= " {
			val, has = string(card[10:]), true
		} else if key == "HIERARCH" {
			// fitsio reads "HIERARCH KEY = value" as KEY; see it the same way.
			if i := strings.IndexByte(string(card), '='); i > 9 {
				key, val, has = strings.TrimSpace(string(card[9:i])), string(card[i+1:]), true
			}
		}
		if has {
			if _, dup := kv[key]; dup && mandatoryRE.MatchString(key) {
				return nil, p, fmt.Errorf("%s: keyword %s appears twice", what, key)
			}
			kv[key] = val
		}
	}
}

// identify checks that the primary HDU says SIMPLE = T, or reads an
// extension's XTENSION type and EXTNAME into s. It returns the HDU's name
// for messages, with the extension type added.
func (s *hduSpan) identify(kv map[string]string, what string) (string, error) {
	if s.index == 0 {
		if v, _ := logicalValue(kv["SIMPLE"]); !v {
			return what, errNotFITS
		}
		return what, nil
	}
	x, ok := stringValue(kv["XTENSION"])
	if !ok {
		return what, fmt.Errorf("%s: XTENSION has no string value", what)
	}
	s.xtension = x
	if n, ok := stringValue(kv["EXTNAME"]); ok {
		s.extname = n
	}
	return fmt.Sprintf("%s (%s)", what, s.xtension), nil
}

// readAxes reads BITPIX (FITS Standard 4.0 Table 8 values only) and
// NAXIS, NAXISn (0..999 axes, none negative) into s, and returns PCOUNT
// and GCOUNT (required in extensions; 0 and 1 for the primary HDU, where
// random groups are refused).
func (s *hduSpan) readAxes(kv map[string]string, what string) (pcount, gcount int, err error) {
	bitpix, ok := intValue(kv["BITPIX"])
	if !ok {
		return 0, 0, fmt.Errorf("%s: missing or invalid BITPIX", what)
	}
	switch bitpix {
	case 8, 16, 32, 64, -32, -64:
	default:
		return 0, 0, fmt.Errorf("%s: BITPIX = %d is not one of 8, 16, 32, 64, -32, -64 (FITS Standard 4.0 Table 8)", what, bitpix)
	}
	s.bitpix = bitpix
	naxis, ok := intValue(kv["NAXIS"])
	if !ok || naxis < 0 || naxis > 999 {
		return 0, 0, fmt.Errorf("%s: missing or invalid NAXIS (must be 0..999)", what)
	}
	s.naxis = make([]int, naxis)
	for i := range s.naxis {
		k := "NAXIS" + strconv.Itoa(i+1)
		n, ok := intValue(kv[k])
		if !ok || n < 0 {
			return 0, 0, fmt.Errorf("%s: missing or negative %s", what, k)
		}
		s.naxis[i] = n
	}
	pcount, gcount = 0, 1
	if s.index > 0 {
		var ok1, ok2 bool
		pcount, ok1 = intValue(kv["PCOUNT"])
		gcount, ok2 = intValue(kv["GCOUNT"])
		if !ok1 || !ok2 || pcount < 0 || gcount < 0 {
			return 0, 0, fmt.Errorf("%s: missing or invalid PCOUNT/GCOUNT", what)
		}
	} else if g, _ := logicalValue(kv["GROUPS"]); g && naxis > 0 && s.naxis[0] == 0 {
		return 0, 0, fmt.Errorf("random-groups files are not supported")
	}
	return pcount, gcount, nil
}

// dataSize returns the size in bytes of a data unit,
// |BITPIX|/8 · GCOUNT · (PCOUNT + NAXIS1·…·NAXISn) (FITS Standard 4.0
// eq. 2), bounded by the file length at every step so nothing overflows,
// and fails if it exceeds the bytes after the header (file length minus
// dataStart).
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

// valueField returns the value part of a card image (columns 11–80) with
// any comment removed. Strings are handled by stringValue.
func valueField(v string) string {
	if i := strings.IndexByte(v, '/'); i >= 0 {
		v = v[:i]
	}
	return strings.TrimSpace(v)
}

// intValue parses an integer value field; false if empty or not an
// integer.
func intValue(v string) (int, bool) {
	f := valueField(v)
	if f == "" {
		return 0, false
	}
	n, err := strconv.Atoi(f)
	return n, err == nil
}

// logicalValue parses a logical value field, T or F; false as the second
// result if it is neither.
func logicalValue(v string) (bool, bool) {
	switch valueField(v) {
	case "T":
		return true, true
	case "F":
		return false, true
	}
	return false, false
}

// stringValue parses a FITS character string value (FITS Standard 4.0
// §4.2.1): enclosed in single quotes, a doubled quote stands for one quote,
// trailing spaces are not significant.
func stringValue(v string) (string, bool) {
	v = strings.TrimLeft(v, " ")
	if len(v) == 0 || v[0] != '\'' {
		return "", false
	}
	var b strings.Builder
	for i := 1; i < len(v); i++ {
		c := v[i]
		if c == '\'' {
			if i+1 < len(v) && v[i+1] == '\'' {
				b.WriteByte('\'')
				i++
				continue
			}
			return strings.TrimRight(b.String(), " "), true
		}
		b.WriteByte(c)
	}
	return "", false
}
