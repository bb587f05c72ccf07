package fits

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"

	"pdwave/internal/atomicfile"
)

// The writer formats headers and data itself, following FITS Standard 4.0
// (IAU FITS Working Group 2016). fitsio v0.3.0's writer is not used because
// its binary tables carry keywords fitsverify rejects (TBCOLn, TSCALn on
// character columns, THEAP with PCOUNT = 0) and its image extensions lack
// PCOUNT/GCOUNT.

// keyRE is the set of valid keyword names (FITS Standard 4.0 §4.1.2.1).
var keyRE = regexp.MustCompile(`^[A-Z0-9_-]{1,8}$`)

// structural keywords are written by the encoder itself and never taken
// from Card lists.
var structuralRE = regexp.MustCompile(`^(SIMPLE|XTENSION|BITPIX|NAXIS[0-9]*|EXTEND|PCOUNT|GCOUNT|GROUPS|BZERO|BSCALE|BLANK|END|EXTNAME|EXTVER|EXTLEVEL|CHECKSUM|DATASUM|TFIELDS|THEAP|T(TYPE|FORM|UNIT|DIM|NULL|SCAL|ZERO|DISP|BCOL)[0-9]+)$`)

// header accumulates 80-character card images.
type header struct {
	lines []string
	index map[string]int // keyword → line index, for "last wins" replacement
}

func newHeader() *header { return &header{index: map[string]int{}} }

// add appends one card. A later card with the same (non-commentary) keyword
// replaces the earlier one in place.
// Every text of a card, value and comment, is made ASCII here (ASCII),
// the one place the writer does so.
func (h *header) add(c Card) error {
	key := strings.TrimRight(c.Key, " ")
	c.Comment = ASCII(c.Comment)
	if s, ok := c.Value.(string); ok {
		c.Value = ASCII(s)
	}
	if isCommentary(key) {
		text := c.Comment
		if text == "" {
			if s, ok := c.Value.(string); ok {
				text = s
			}
		}
		for {
			n := min(len(text), 72)
			h.lines = append(h.lines, pad80(fmt.Sprintf("%-8s%s", key, text[:n])))
			text = text[n:]
			if text == "" {
				break
			}
		}
		return nil
	}
	if !keyRE.MatchString(key) {
		return fmt.Errorf("invalid FITS keyword %q (1–8 characters of A–Z, 0–9, '-', '_')", c.Key)
	}
	lines, err := formatCard(key, c.Value, c.Comment)
	if err != nil {
		return err
	}
	if _, ok := h.index["LONGSTRN"]; len(lines) > 1 && !ok {
		// Announce CONTINUE cards, as fitsverify recommends.
		if err := h.add(Card{Key: "LONGSTRN", Value: "OGIP 1.0", Comment: "long strings continue on CONTINUE cards"}); err != nil {
			return err
		}
	}
	if i, ok := h.index[key]; ok {
		// Replace an earlier (possibly continued) card: blank its lines,
		// which bytes() drops, and append the new one.
		h.lines[i] = pad80("")
		for j := i + 1; j < len(h.lines) && strings.HasPrefix(h.lines[j], "CONTINUE"); j++ {
			h.lines[j] = pad80("")
		}
	}
	h.index[key] = len(h.lines)
	h.lines = append(h.lines, lines...)
	return nil
}

// addUser appends caller cards, skipping the structural keywords the
// encoder owns.
func (h *header) addUser(cards []Card) error {
	for _, c := range cards {
		key := strings.TrimRight(c.Key, " ")
		if structuralRE.MatchString(key) {
			continue
		}
		if err := h.add(c); err != nil {
			return err
		}
	}
	return nil
}

// bytes returns the header with END, padded with spaces to whole blocks.
func (h *header) bytes() []byte {
	var b strings.Builder
	for _, l := range h.lines {
		if strings.TrimSpace(l) == "" {
			continue // blanked by a replacement
		}
		b.WriteString(l)
	}
	b.WriteString(pad80("END"))
	for b.Len()%blockSize != 0 {
		b.WriteByte(' ')
	}
	return []byte(b.String())
}

func pad80(s string) string {
	if len(s) >= cardSize {
		return s[:cardSize]
	}
	return s + strings.Repeat(" ", cardSize-len(s))
}

// formatCard renders a value card in the fixed format of FITS Standard 4.0
// §4.2 (logical, integer and real values right-justified to column 30,
// strings starting in column 11). Strings longer than one card use the
// CONTINUE long-string convention (§4.2.1.2). The comment is truncated to
// fit the card.
func formatCard(key string, value any, comment string) ([]string, error) {
	prefix := fmt.Sprintf("%-8s= ", key)
	var val string
	switch v := value.(type) {
	case nil:
		val = ""
	case bool:
		val = fmt.Sprintf("%20s", map[bool]string{true: "T", false: "F"}[v])
	case int:
		val = fmt.Sprintf("%20d", v)
	case int8, int16, int32, int64, uint8, uint16, uint32:
		val = fmt.Sprintf("%20d", v)
	case uint:
		if uint64(v) > math.MaxInt64 {
			return nil, fmt.Errorf("keyword %s: integer %d too large", key, v)
		}
		val = fmt.Sprintf("%20d", v)
	case uint64:
		if v > math.MaxInt64 {
			return nil, fmt.Errorf("keyword %s: integer %d too large", key, v)
		}
		val = fmt.Sprintf("%20d", v)
	case float32:
		s, err := formatReal(float64(v))
		if err != nil {
			return nil, fmt.Errorf("keyword %s: %w", key, err)
		}
		val = fmt.Sprintf("%20s", s)
	case float64:
		s, err := formatReal(v)
		if err != nil {
			return nil, fmt.Errorf("keyword %s: %w", key, err)
		}
		val = fmt.Sprintf("%20s", s)
	case string:
		return formatString(prefix, v, comment)
	default:
		return nil, fmt.Errorf("keyword %s: unsupported value type %T", key, value)
	}
	return []string{withComment(prefix+val, comment)}, nil
}

// formatReal writes the shortest decimal that reads back to the same
// float64, with the decimal point the fixed format requires.
func formatReal(v float64) (string, error) {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "", fmt.Errorf("value %v cannot be written in a FITS header", v)
	}
	s := strconv.FormatFloat(v, 'G', -1, 64)
	if !strings.ContainsAny(s, ".") {
		if i := strings.IndexByte(s, 'E'); i >= 0 {
			s = s[:i] + ".0" + s[i:]
		} else {
			s += ".0"
		}
	}
	return s, nil
}

func withComment(line, comment string) string {
	if comment != "" {
		c := " / " + comment
		if room := cardSize - len(line); room > 3 {
			if len(c) > room {
				c = c[:room]
			}
			line += c
		}
	}
	return pad80(line)
}

func quote(s string) string { return strings.ReplaceAll(s, "'", "''") }

// formatString renders a string value (printable ASCII: header.add made
// it so); values longer than 68 characters (after doubling quotes) are
// split over CONTINUE cards, each piece but the last ending in '&' (FITS
// Standard 4.0 §4.2.1.2).
func formatString(prefix, s, comment string) ([]string, error) {
	q := quote(s)
	if len(q) <= 68 {
		v := "'" + q + "'"
		if len(q) < 8 {
			v = "'" + q + strings.Repeat(" ", 8-len(q)) + "'"
		}
		return []string{withComment(prefix+fmt.Sprintf("%-20s", v), comment)}, nil
	}
	// Split s into pieces whose quoted form plus '&' fits in 67 characters.
	var pieces []string
	for s != "" {
		n, w := 0, 0
		for n < len(s) {
			cw := 1
			if s[n] == '\'' {
				cw = 2
			}
			if w+cw > 66 {
				break
			}
			w += cw
			n++
		}
		pieces = append(pieces, s[:n])
		s = s[n:]
	}
	lines := make([]string, len(pieces))
	for i, p := range pieces {
		amp := "&"
		if i == len(pieces)-1 {
			amp = ""
		}
		v := "'" + quote(p) + amp + "'"
		if i == 0 {
			lines[i] = pad80(prefix + v)
		} else if i == len(pieces)-1 {
			lines[i] = withComment("CONTINUE  "+v, comment)
		} else {
			lines[i] = pad80("CONTINUE  " + v)
		}
	}
	return lines, nil
}

// dataUnit is an encoded HDU: header bytes and a writer of its data.
type dataUnit struct {
	h    *header // without DATASUM and CHECKSUM (checksumHeader adds them)
	size int     // data bytes before padding
	put  func(w *bufio.Writer) error
}

// encodeImage builds an image HDU with BITPIX −32 (IEEE float32, big-endian,
// FITS Standard 4.0 §5.3).
func encodeImage(img *Image, primary, extend bool) (dataUnit, error) {
	n := 1
	for _, d := range img.Dims {
		if d < 1 {
			return dataUnit{}, fmt.Errorf("image %q: dimension %d < 1", img.Name, d)
		}
		if n > math.MaxInt32/d {
			return dataUnit{}, fmt.Errorf("image %q: too large", img.Name)
		}
		n *= d
	}
	if len(img.Dims) == 0 {
		n = 0
	}
	if len(img.Dims) > 999 {
		return dataUnit{}, fmt.Errorf("image %q: %d axes (at most 999)", img.Name, len(img.Dims))
	}
	if len(img.Data) != n {
		return dataUnit{}, fmt.Errorf("image %q: %d values for dimensions %v (want %d)", img.Name, len(img.Data), img.Dims, n)
	}
	h := newHeader()
	var err error
	if primary {
		err = h.add(Card{Key: "SIMPLE", Value: true, Comment: "conforms to FITS Standard 4.0"})
	} else {
		err = h.add(Card{Key: "XTENSION", Value: "IMAGE", Comment: "image extension"})
	}
	if err != nil {
		return dataUnit{}, err
	}
	must(h.add(Card{Key: "BITPIX", Value: -32, Comment: "IEEE single precision"}))
	must(h.add(Card{Key: "NAXIS", Value: len(img.Dims), Comment: "number of axes"}))
	for i, d := range img.Dims {
		must(h.add(Card{Key: "NAXIS" + strconv.Itoa(i+1), Value: d}))
	}
	if primary {
		if extend {
			must(h.add(Card{Key: "EXTEND", Value: true, Comment: "extensions may follow"}))
		}
		if img.Name != "" {
			if err := h.add(Card{Key: "EXTNAME", Value: img.Name}); err != nil {
				return dataUnit{}, fmt.Errorf("image %q: %w", img.Name, err)
			}
		}
	} else {
		must(h.add(Card{Key: "PCOUNT", Value: 0}))
		must(h.add(Card{Key: "GCOUNT", Value: 1}))
		if err := h.add(Card{Key: "EXTNAME", Value: img.Name, Comment: "extension name"}); err != nil {
			return dataUnit{}, fmt.Errorf("image %q: %w", img.Name, err)
		}
	}
	if err := h.addUser(img.Cards); err != nil {
		return dataUnit{}, fmt.Errorf("image %q: %w", img.Name, err)
	}
	data := img.Data
	return dataUnit{h: h, size: 4 * n, put: func(w *bufio.Writer) error {
		var b [4]byte
		for _, v := range data {
			binary.BigEndian.PutUint32(b[:], math.Float32bits(float32(v)))
			if _, err := w.Write(b[:]); err != nil {
				return err
			}
		}
		return nil
	}}, nil
}

func must(err error) {
	if err != nil {
		panic(err) // only for cards the encoder itself builds; a failure is a bug here
	}
}

// encodeTable builds a binary table extension (FITS Standard 4.0 §7.3).
func encodeTable(t *Table) (dataUnit, error) {
	if len(t.Columns) == 0 {
		return dataUnit{}, fmt.Errorf("table %q has no columns", t.Name)
	}
	forms, widths, rows, rowBytes, err := tableLayout(t)
	if err != nil {
		return dataUnit{}, err
	}
	h, err := tableHeader(t, forms, rows, rowBytes)
	if err != nil {
		return dataUnit{}, err
	}
	return dataUnit{h: h, size: rows * rowBytes, put: tableRows(t.Columns, widths, rows)}, nil
}

// tableLayout checks the columns of t and returns each column's TFORM and
// width in bytes, the common number of rows and the bytes per row.
func tableLayout(t *Table) (forms []string, widths []int, rows, rowBytes int, err error) {
	rows = -1
	forms = make([]string, len(t.Columns))
	widths = make([]int, len(t.Columns))
	for i, c := range t.Columns {
		form, width, r, err := columnForm(t.Name, c)
		if err != nil {
			return nil, nil, 0, 0, err
		}
		forms[i], widths[i] = form, width
		if rows >= 0 && r != rows {
			return nil, nil, 0, 0, fmt.Errorf("table %q column %q: %d rows, earlier columns have %d", t.Name, c.Name, r, rows)
		}
		rows = r
		rowBytes += widths[i]
	}
	return forms, widths, rows, rowBytes, nil
}

// columnForm checks one column of the table named table and returns its
// TFORM ("rD", "1K" or "wA"), its width in bytes and its number of rows.
// Exactly one of Float, Int, Text must be set.
func columnForm(table string, c Column) (form string, width, rows int, err error) {
	set := 0
	if c.Float != nil {
		set++
		rows = len(c.Float)
		rep := 0
		if rows > 0 {
			rep = len(c.Float[0])
		}
		for k, row := range c.Float {
			if len(row) != rep {
				return "", 0, 0, fmt.Errorf("table %q column %q: row %d has %d values, row 0 has %d", table, c.Name, k, len(row), rep)
			}
		}
		if rep < 1 && rows > 0 {
			return "", 0, 0, fmt.Errorf("table %q column %q: empty rows", table, c.Name)
		}
		if rows == 0 && len(c.Dims) > 0 && len(c.Dims) <= 999 {
			rep = 1 // an empty table keeps its cell shape
			for _, d := range c.Dims {
				if d >= 1 && rep <= math.MaxInt32/d {
					rep *= d
				}
			}
		}
		rep = max(rep, 1)
		form, width = strconv.Itoa(rep)+"D", 8*rep
		if err := checkDims(c.Dims, rep); err != nil {
			return "", 0, 0, fmt.Errorf("table %q column %q: %w", table, c.Name, err)
		}
	}
	if c.Dims != nil && c.Float == nil {
		return "", 0, 0, fmt.Errorf("table %q column %q: Dims on a column that is not Float", table, c.Name)
	}
	if c.Int != nil {
		set++
		rows = len(c.Int)
		form, width = "1K", 8
	}
	if c.Text != nil {
		set++
		rows = len(c.Text)
		w := 1
		for _, s := range c.Text {
			for k := 0; k < len(s); k++ {
				if s[k] < 32 || s[k] > 126 {
					return "", 0, 0, fmt.Errorf("table %q column %q: text %q has characters outside printable ASCII", table, c.Name, s)
				}
			}
			w = max(w, len(s))
		}
		form, width = strconv.Itoa(w)+"A", w
	}
	if set != 1 {
		return "", 0, 0, fmt.Errorf("table %q column %q: exactly one of Float, Int, Text must be set", table, c.Name)
	}
	return form, width, rows, nil
}

// checkDims checks that dims (nil for none) is a shape of positive axes
// holding rep values.
func checkDims(dims []int, rep int) error {
	if dims == nil {
		return nil
	}
	if len(dims) == 0 || len(dims) > 999 {
		return fmt.Errorf("cell shape %v: 1 to 999 axes", dims)
	}
	n := 1
	for _, d := range dims {
		if d < 1 || n > rep/d {
			return fmt.Errorf("cell shape %v does not hold the %d values of a cell", dims, rep)
		}
		n *= d
	}
	if n != rep {
		return fmt.Errorf("cell shape %v holds %d values, a cell has %d", dims, n, rep)
	}
	return nil
}

// tdim is the TDIMn value of a cell shape: "(d1,d2,...)" (§7.3.2).
func tdim(dims []int) string {
	s := make([]string, len(dims))
	for i, d := range dims {
		s[i] = strconv.Itoa(d)
	}
	return "(" + strings.Join(s, ",") + ")"
}

// tableHeader returns the header of the binary table t: the structural
// keywords for rows rows of rowBytes bytes, TTYPEn/TFORMn/TUNITn per column
// (forms from tableLayout), EXTNAME, then t.Cards.
func tableHeader(t *Table, forms []string, rows, rowBytes int) (*header, error) {
	h := newHeader()
	if err := h.add(Card{Key: "XTENSION", Value: "BINTABLE", Comment: "binary table extension"}); err != nil {
		return nil, err
	}
	must(h.add(Card{Key: "BITPIX", Value: 8}))
	must(h.add(Card{Key: "NAXIS", Value: 2}))
	must(h.add(Card{Key: "NAXIS1", Value: rowBytes, Comment: "bytes per row"}))
	must(h.add(Card{Key: "NAXIS2", Value: rows, Comment: "rows"}))
	must(h.add(Card{Key: "PCOUNT", Value: 0}))
	must(h.add(Card{Key: "GCOUNT", Value: 1}))
	must(h.add(Card{Key: "TFIELDS", Value: len(t.Columns)}))
	for i, c := range t.Columns {
		n := strconv.Itoa(i + 1)
		if err := h.add(Card{Key: "TTYPE" + n, Value: c.Name}); err != nil {
			return nil, fmt.Errorf("table %q: %w", t.Name, err)
		}
		must(h.add(Card{Key: "TFORM" + n, Value: forms[i]}))
		if c.Unit != "" {
			if err := h.add(Card{Key: "TUNIT" + n, Value: c.Unit}); err != nil {
				return nil, fmt.Errorf("table %q: %w", t.Name, err)
			}
		}
		if c.Dims != nil {
			must(h.add(Card{Key: "TDIM" + n, Value: tdim(c.Dims), Comment: "cell shape, fastest axis first"}))
		}
	}
	if err := h.add(Card{Key: "EXTNAME", Value: t.Name, Comment: "extension name"}); err != nil {
		return nil, fmt.Errorf("table %q: %w", t.Name, err)
	}
	if err := h.addUser(t.Cards); err != nil {
		return nil, fmt.Errorf("table %q: %w", t.Name, err)
	}
	return h, nil
}

// tableRows returns the writer of the table data: rows rows of the columns
// cols, big-endian, Float as IEEE float64, Int as 64-bit two's complement,
// Text blank-padded to widths[i] bytes. It keeps cols (no copy).
func tableRows(cols []Column, widths []int, rows int) func(w *bufio.Writer) error {
	return func(w *bufio.Writer) error {
		var b [8]byte
		for r := 0; r < rows; r++ {
			for i, c := range cols {
				switch {
				case c.Float != nil:
					for _, v := range c.Float[r] {
						binary.BigEndian.PutUint64(b[:], math.Float64bits(v))
						w.Write(b[:])
					}
				case c.Int != nil:
					binary.BigEndian.PutUint64(b[:], uint64(c.Int[r]))
					w.Write(b[:])
				default:
					s := c.Text[r]
					w.WriteString(s)
					for k := len(s); k < widths[i]; k++ {
						w.WriteByte(' ')
					}
				}
			}
		}
		return nil
	}
}

// writeUnits writes the units to path atomically (atomicfile.Write): path
// is either the old file or the complete new one. Every header gets
// DATASUM and CHECKSUM (checksumHeader).
func writeUnits(path string, units []dataUnit) error {
	hdrs := make([][]byte, len(units))
	for i, u := range units {
		var err error
		if hdrs[i], err = checksumHeader(u); err != nil {
			return err
		}
	}
	return atomicfile.Write(path, func(iw io.Writer) error {
		w, ok := iw.(*bufio.Writer) // atomicfile passes a buffered writer
		if !ok {
			w = bufio.NewWriter(iw)
		}
		zeros := make([]byte, blockSize)
		for i, u := range units {
			if _, err := w.Write(hdrs[i]); err != nil {
				return err
			}
			if err := u.put(w); err != nil {
				return err
			}
			if p := roundBlock(u.size) - u.size; p > 0 {
				if _, err := w.Write(zeros[:p]); err != nil {
					return err
				}
			}
		}
		return w.Flush()
	})
}

// ValidKey reports whether key is a valid standard keyword name: 1–8
// characters of A–Z, 0–9, '-' and '_' (FITS Standard 4.0 §4.1.2.1).
func ValidKey(key string) bool { return keyRE.MatchString(key) }

// Structural reports whether key is one of the keywords that describe an
// HDU's structure (SIMPLE, XTENSION, BITPIX, NAXISn, EXTEND, PCOUNT,
// GCOUNT, GROUPS, BZERO, BSCALE, BLANK, END, EXTNAME, EXTVER, EXTLEVEL,
// CHECKSUM, DATASUM, TFIELDS, THEAP and the table's TTYPEn ... TBCOLn).
// WriteFile writes these itself and ignores them in Card lists.
func Structural(key string) bool { return structuralRE.MatchString(key) }

// IsCommentary reports whether key is COMMENT, HISTORY or blank, the
// keywords whose text is in Card.Comment.
func IsCommentary(key string) bool { return isCommentary(key) }

// EncodeHeader returns a header of the given cards in order, in the fixed
// format of FITS Standard 4.0 §4.2, with the END card, padded with blanks
// to whole 2880-byte blocks. Unlike WriteFile it neither adds nor skips
// structural keywords: the caller gives them all (tests and tools that
// build files of other BITPIX use it). A later card with the keyword of an
// earlier one replaces it.
func EncodeHeader(cards []Card) ([]byte, error) {
	h := newHeader()
	for _, c := range cards {
		if err := h.add(c); err != nil {
			return nil, err
		}
	}
	return h.bytes(), nil
}
