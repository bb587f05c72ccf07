package fits

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// column is one field of a binary-table row (FITS Standard 4.0 §7.3.1).
type column struct {
	name   string
	code   byte // TFORM type code: L X B I J K A E D C M, or P/Q for arrays in the heap
	elem   byte // element type of a P/Q array
	repeat int
	offset int // first byte in the row
	width  int // bytes in the row
}

// table is the layout of a binary table and its heap.
type table struct {
	what       string
	rowBytes   int
	rows       int
	cols       []column
	fixed      []byte // rows × rowBytes
	heap       []byte // from THEAP to the end of the data unit; nil when read as needed
	heapOffset int    // THEAP
	heapLen    int    // bytes of the heap
	src        *source
	heapAt     int // first byte of the heap in src
	buf        []byte
}

// typeWidth is the byte width of one element of each TFORM type code
// (FITS Standard 4.0 Table 18); 0 for X (bits), handled apart.
var typeWidth = map[byte]int{'L': 1, 'X': 0, 'B': 1, 'I': 2, 'J': 4, 'K': 8, 'A': 1, 'E': 4, 'D': 8, 'C': 8, 'M': 16, 'P': 8, 'Q': 16}

// parseTForm parses "rT" or "rPT(max)" / "rQT(max)" (§7.3.1, §7.3.5).
func parseTForm(form string) (repeat int, code, elem byte, err error) {
	form = strings.TrimSpace(form)
	i := 0
	for i < len(form) && form[i] >= '0' && form[i] <= '9' {
		i++
	}
	if i == len(form) {
		return 0, 0, 0, fmt.Errorf("bad TFORM %q", form)
	}
	repeat = 1
	if i > 0 {
		if repeat, err = strconv.Atoi(form[:i]); err != nil || repeat > 1<<30 {
			return 0, 0, 0, fmt.Errorf("bad TFORM %q", form)
		}
	}
	code = form[i]
	if _, ok := typeWidth[code]; !ok {
		return 0, 0, 0, fmt.Errorf("bad TFORM %q: unknown type %q", form, code)
	}
	if code == 'P' || code == 'Q' {
		if i+1 >= len(form) {
			return 0, 0, 0, fmt.Errorf("bad TFORM %q: no element type", form)
		}
		elem = form[i+1]
		if w, ok := typeWidth[elem]; !ok || elem == 'P' || elem == 'Q' || w == 0 {
			return 0, 0, 0, fmt.Errorf("bad TFORM %q: element type %q", form, elem)
		}
		if repeat > 1 {
			return 0, 0, 0, fmt.Errorf("bad TFORM %q: repeat > 1 for an array descriptor", form)
		}
	}
	return repeat, code, elem, nil
}

// table reads the layout of the binary table h: TFIELDS, TFORMn, TTYPEn,
// NAXIS1 (row bytes), NAXIS2 (rows) and THEAP, checking that the columns
// fill the row exactly and the heap lies inside the data unit.
func (h *Unit) table() (*table, error) {
	if h.Xtension != "BINTABLE" || len(h.Axes) != 2 || h.Bitpix != 8 {
		return nil, fmt.Errorf("%s is not a binary table (XTENSION = 'BINTABLE', BITPIX = 8, NAXIS = 2)", h.what())
	}
	t := &table{what: h.what(), rowBytes: h.Axes[0], rows: h.Axes[1]}
	nf, ok, err := h.Header.Int("TFIELDS")
	if err != nil || !ok || nf < 0 || nf > 999 {
		return nil, fmt.Errorf("%s: missing or invalid TFIELDS", t.what)
	}
	off := 0
	for i := 1; i <= nf; i++ {
		k := strconv.Itoa(i)
		form, ok, err := h.Header.String("TFORM" + k)
		if err != nil || !ok {
			return nil, fmt.Errorf("%s: missing or invalid TFORM%s", t.what, k)
		}
		c := column{offset: off}
		if c.repeat, c.code, c.elem, err = parseTForm(form); err != nil {
			return nil, fmt.Errorf("%s: TFORM%s: %w", t.what, k, err)
		}
		c.name, _, _ = h.Header.String("TTYPE" + k)
		if c.code == 'X' {
			c.width = (c.repeat + 7) / 8
		} else {
			c.width = c.repeat * typeWidth[c.code]
		}
		if c.width > t.rowBytes-off {
			return nil, fmt.Errorf("%s: the columns need more than NAXIS1 = %d bytes a row", t.what, t.rowBytes)
		}
		off += c.width
		t.cols = append(t.cols, c)
	}
	if off != t.rowBytes {
		return nil, fmt.Errorf("%s: the columns fill %d bytes of a row, NAXIS1 = %d", t.what, off, t.rowBytes)
	}
	fixed := t.rowBytes * t.rows // no overflow: the scan bounded NAXIS1·NAXIS2 by the file
	if fixed > h.size {
		return nil, fmt.Errorf("%s: %d rows of %d bytes but a data unit of %d bytes (GCOUNT = 0?)", t.what, t.rows, t.rowBytes, h.size)
	}
	if t.fixed, err = h.src.read(h.off, fixed); err != nil {
		return nil, fmt.Errorf("%s: %w", t.what, err)
	}
	theap, ok, err := h.Header.Int("THEAP")
	if err != nil {
		return nil, fmt.Errorf("%s: %w", t.what, err)
	}
	if !ok {
		theap = fixed
	}
	if theap < fixed || theap > h.size {
		return nil, fmt.Errorf("%s: THEAP = %d outside the data unit (table %d bytes, data %d bytes)", t.what, theap, fixed, h.size)
	}
	t.heapOffset, t.heapLen, t.src, t.heapAt = theap, h.size-theap, h.src, h.off+theap
	if h.data != nil {
		t.heap = h.data[theap:]
	}
	return t, nil
}

// col returns the index of the column named name (case-insensitive, as
// §7.3.2 recommends unique names regardless of case), or -1.
func (t *table) col(name string) int {
	for i, c := range t.cols {
		if strings.EqualFold(strings.TrimSpace(c.name), name) {
			return i
		}
	}
	return -1
}

// cell returns the bytes of column ci in row r.
func (t *table) cell(r, ci int) []byte {
	c := t.cols[ci]
	p := r*t.rowBytes + c.offset
	return t.fixed[p : p+c.width]
}

// array returns the heap bytes of the variable-length array of column ci
// in row r and its element count (§7.3.5: a P descriptor is two 32-bit
// integers, a Q descriptor two 64-bit ones: count, then byte offset into
// the heap). The array must lie inside the heap.
func (t *table) array(r, ci int) ([]byte, int, error) {
	c := t.cols[ci]
	b := t.cell(r, ci)
	var n, off int64
	if c.code == 'P' {
		n, off = int64(int32(binary.BigEndian.Uint32(b))), int64(int32(binary.BigEndian.Uint32(b[4:])))
	} else {
		n, off = int64(binary.BigEndian.Uint64(b)), int64(binary.BigEndian.Uint64(b[8:]))
	}
	w := int64(typeWidth[c.elem])
	if n < 0 || off < 0 || off > int64(t.heapLen) || n > (int64(t.heapLen)-off)/w {
		return nil, 0, fmt.Errorf("%s row %d column %s: array of %d elements at heap offset %d lies outside the %d-byte heap", t.what, r+1, c.name, n, off, t.heapLen)
	}
	if t.heap != nil {
		return t.heap[off : off+n*w], int(n), nil
	}
	// Read as needed, into a buffer reused by the next call.
	b, err := t.src.readInto(t.buf, t.heapAt+int(off), int(n*w))
	if err != nil {
		return nil, 0, fmt.Errorf("%s row %d column %s: %w", t.what, r+1, c.name, err)
	}
	t.buf = b
	return b, int(n), nil
}

// scalar returns the first element of column ci in row r as float64 (types
// B, I, J, K, E, D).
func (t *table) scalar(r, ci int) (float64, error) {
	c := t.cols[ci]
	if c.repeat < 1 {
		return 0, fmt.Errorf("%s column %s has no elements", t.what, c.name)
	}
	b := t.cell(r, ci)
	be := binary.BigEndian
	switch c.code {
	case 'B':
		return float64(b[0]), nil
	case 'I':
		return float64(int16(be.Uint16(b))), nil
	case 'J':
		return float64(int32(be.Uint32(b))), nil
	case 'K':
		return float64(int64(be.Uint64(b))), nil
	case 'E':
		return float64(math.Float32frombits(be.Uint32(b))), nil
	case 'D':
		return math.Float64frombits(be.Uint64(b)), nil
	}
	return 0, fmt.Errorf("%s column %s has TFORM type %c, want a number", t.what, c.name, c.code)
}

// errNoColumn is returned (wrapped) by FloatColumn when the column is
// absent.
var errNoColumn = errors.New("no such column")

// IsNoColumn reports whether err says that a column is absent.
func IsNoColumn(err error) bool { return errors.Is(err, errNoColumn) }

// FloatColumn reads the column name (case-insensitive) of the binary table
// h: one slice per row of the column's repeat count of values, which must
// be floating point (TFORM type D or E, §7.3.3). TSCALn/TZEROn are not
// applied (they are not used with floating-point columns here). It errors
// if h is not a binary table, the column is absent (IsNoColumn) or not
// floating point.
func (h *Unit) FloatColumn(name string) ([][]float64, error) {
	t, err := h.table()
	if err != nil {
		return nil, err
	}
	ci := t.col(name)
	if ci < 0 {
		return nil, fmt.Errorf("%s: column %s: %w", t.what, name, errNoColumn)
	}
	c := t.cols[ci]
	if c.code != 'D' && c.code != 'E' {
		return nil, fmt.Errorf("%s: column %s has TFORM %d%c, want floating point (D or E)", t.what, name, c.repeat, c.code)
	}
	if int64(t.rows)*int64(c.repeat) > h.lim.maxBytes()/8 {
		return nil, fmt.Errorf("%s: column %s is larger than the limit", t.what, name)
	}
	out := make([][]float64, t.rows)
	be := binary.BigEndian
	for r := range out {
		b := t.cell(r, ci)
		row := make([]float64, c.repeat)
		for i := range row {
			if c.code == 'D' {
				row[i] = math.Float64frombits(be.Uint64(b[8*i:]))
			} else {
				row[i] = float64(math.Float32frombits(be.Uint32(b[4*i:])))
			}
		}
		out[r] = row
	}
	return out, nil
}

// Rows returns the number of rows of the binary table h (NAXIS2), or an
// error if h is not a binary table.
func (h *Unit) Rows() (int, error) {
	t, err := h.table()
	if err != nil {
		return 0, err
	}
	return t.rows, nil
}
