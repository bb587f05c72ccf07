package restore

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"reflect"
	"strconv"
	"strings"
	"unicode/utf8"

	"pdwave/model/fits"

	"github.com/astrogo/fitsio"
)

// partMeta is the JSON of a part's META table: Meta without Mean, with
// typed header cards.
type partMeta struct {
	Meta
	Mean  []float64  `json:"-"`
	Cards []partCard `json:"PartCards"`
}

// partCard is a header card with the type of its value kept: Kind is "s"
// (string), "b" (bool), "i" (integer), "f" (float, %g exact) or "" (none).
type partCard struct {
	Key, Kind, Value, Comment string
}

// encodePartMeta returns the JSON of m for the META table, with every
// non-ASCII character escaped (FITS table text is ASCII).
func encodePartMeta(m *Meta) (string, error) {
	pm := partMeta{Meta: *m}
	pm.Meta.Cards, pm.Meta.Mean = nil, nil
	for _, c := range m.Cards {
		pc := partCard{Key: c.Key, Comment: c.Comment}
		switch v := c.Value.(type) {
		case nil:
		case string:
			pc.Kind, pc.Value = "s", v
		case bool:
			pc.Kind, pc.Value = "b", strconv.FormatBool(v)
		case int:
			pc.Kind, pc.Value = "i", strconv.Itoa(v)
		case int64:
			pc.Kind, pc.Value = "i", strconv.FormatInt(v, 10)
		case float64:
			pc.Kind, pc.Value = "f", strconv.FormatFloat(v, 'g', -1, 64)
		default:
			return "", fmt.Errorf("header card %s: value of type %T", c.Key, c.Value)
		}
		pm.Cards = append(pm.Cards, pc)
	}
	b, err := json.Marshal(pm)
	if err != nil {
		return "", err
	}
	var s strings.Builder
	for _, r := range string(b) {
		switch {
		case r < utf8.RuneSelf:
			s.WriteRune(r)
		case r > 0xFFFF:
			r -= 0x10000
			fmt.Fprintf(&s, `\u%04x\u%04x`, 0xD800+(r>>10), 0xDC00+(r&0x3FF))
		default:
			fmt.Fprintf(&s, `\u%04x`, r)
		}
	}
	return s.String(), nil
}

// decodePartMeta is the inverse of encodePartMeta (Mean left nil).
func decodePartMeta(js string) (*Meta, error) {
	var pm partMeta
	if err := json.Unmarshal([]byte(js), &pm); err != nil {
		return nil, fmt.Errorf("META: %w", err)
	}
	m := pm.Meta
	for _, pc := range pm.Cards {
		c := fits.Card{Key: pc.Key, Comment: pc.Comment}
		var err error
		switch pc.Kind {
		case "":
		case "s":
			c.Value = pc.Value
		case "b":
			c.Value, err = strconv.ParseBool(pc.Value)
		case "i":
			c.Value, err = strconv.Atoi(pc.Value)
		case "f":
			c.Value, err = strconv.ParseFloat(pc.Value, 64)
		default:
			err = fmt.Errorf("unknown kind %q", pc.Kind)
		}
		if err != nil {
			return nil, fmt.Errorf("META: card %s: %w", pc.Key, err)
		}
		m.Cards = append(m.Cards, c)
	}
	return &m, nil
}

// partReader reads one part file.
type partReader struct {
	path   string
	meta   *Meta
	shard  Shard
	lo, hi int
	total  int
}

// openPart reads the header and META of the part file path (not
// its patches), after checking that every HDU's declared size fits in the
// file.
func openPart(path string) (*partReader, error) {
	var r *partReader
	err := withFITS(path, 2, func(hdus []fitsio.HDU) error {
		var err error
		r, err = partHeader(path, hdus)
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return r, nil
}

// withFITS checks the HDU sizes of the FITS file path against its length
// (fits.Open, the project's bounded scanner), decodes its first n HDUs (all if n ≤ 0) with fitsio
// and calls fn; a panic of the decoder on malformed data is an error.
func withFITS(path string, n int, fn func([]fitsio.HDU) error) (err error) {
	if _, err := fits.Open(path, fits.Limits{}); err != nil {
		return err
	}
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("malformed FITS: %v", p)
		}
	}()
	dec := fitsio.NewDecoder(f)
	var hdus []fitsio.HDU
	for n <= 0 || len(hdus) < n {
		h, err := dec.DecodeHDU()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return err
		}
		hdus = append(hdus, h)
	}
	return fn(hdus)
}

// partHeader reads the primary header and META table of a part.
func partHeader(path string, hdus []fitsio.HDU) (*partReader, error) {
	if len(hdus) < 2 {
		return nil, errors.New("not a pdwave restore part (too few HDUs)")
	}
	h := hdus[0].Header()
	v, ok := cardInt(h, "PDPARTV")
	if !ok {
		return nil, errors.New("not a pdwave restore part (no PDPARTV)")
	}
	if v != partVersion {
		return nil, fmt.Errorf("part format %d, this program reads %d", v, partVersion)
	}
	r := &partReader{path: path}
	var ok1, ok2, ok3 bool
	r.lo, ok1 = cardInt(h, "PDLO")
	r.hi, ok2 = cardInt(h, "PDHI")
	r.total, ok3 = cardInt(h, "PDTOTAL")
	c := h.Get("PDSHARD")
	if !ok1 || !ok2 || !ok3 || c == nil {
		return nil, errors.New("part header lacks PDSHARD, PDLO, PDHI or PDTOTAL")
	}
	sv, _ := c.Value.(string)
	sh, err := ParseShard(strings.TrimSpace(sv))
	if err != nil {
		return nil, err
	}
	r.shard = sh
	tbl, ok := hdus[1].(*fitsio.Table)
	if !ok || hdus[1].Name() != "META" || tbl.NumRows() != 1 {
		return nil, errors.New("second HDU is not the one-row META table")
	}
	var js string
	if err := scanRows(tbl, func(rows *fitsio.Rows) error { return rows.Scan(&js) }); err != nil {
		return nil, fmt.Errorf("META: %w", err)
	}
	if r.meta, err = decodePartMeta(js); err != nil {
		return nil, err
	}
	if lo, hi := sh.Range(r.total); lo != r.lo || hi != r.hi {
		return nil, fmt.Errorf("shard %v of %d patches is [%d, %d), the header says [%d, %d)", sh, r.total, lo, hi, r.lo, r.hi)
	}
	return r, nil
}

// cardInt returns the integer value of the card key of h.
func cardInt(h *fitsio.Header, key string) (int, bool) {
	c := h.Get(key)
	if c == nil {
		return 0, false
	}
	v, ok := fits.Number(c.Value)
	if !ok || v != math.Trunc(v) || math.Abs(v) > 1<<40 {
		return 0, false
	}
	return int(v), true
}

// scanRows calls fn for every row of tbl.
func scanRows(tbl *fitsio.Table, fn func(*fitsio.Rows) error) error {
	rows, err := tbl.Read(0, tbl.NumRows())
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		if err := fn(rows); err != nil {
			return err
		}
	}
	return rows.Err()
}

// patches reads the mean image and every patch of the part, checking their
// sizes against the META, and hands the patches to fn in file order.
func (r *partReader) patches(fn func(*PatchResult) error) error {
	err := withFITS(r.path, 0, func(hdus []fitsio.HDU) error {
		if len(hdus) != 4 || hdus[2].Name() != "MEAN" || hdus[3].Name() != "PATCHES" {
			return errors.New("want the HDUs primary, META, MEAN, PATCHES")
		}
		mean, ok1 := hdus[2].(*fitsio.Table)
		pt, ok2 := hdus[3].(*fitsio.Table)
		if !ok1 || !ok2 {
			return errors.New("MEAN or PATCHES is not a binary table")
		}
		if err := r.readMean(mean); err != nil {
			return err
		}
		return r.readPatches(pt, fn)
	})
	if err != nil {
		return fmt.Errorf("reading %s: %w", r.path, err)
	}
	return nil
}

// readMean reads the MEAN table into r.meta.Mean.
func (r *partReader) readMean(tbl *fitsio.Table) error {
	m := r.meta
	if int(tbl.NumRows()) != m.Ny || tbl.NumCols() != 1 {
		return fmt.Errorf("MEAN has %d rows, want %d", tbl.NumRows(), m.Ny)
	}
	m.Mean = make([]float64, 0, m.Nx*m.Ny)
	return scanRows(tbl, func(rows *fitsio.Rows) error {
		row, err := scanFloats(rows, []string{"MEAN"}, []int{m.Nx})
		if err != nil {
			return fmt.Errorf("MEAN: %w", err)
		}
		m.Mean = append(m.Mean, row[0]...)
		return nil
	})
}

// partVectors are the vector columns of PATCHES, in table order after the
// integers.
var partVectors = []string{"METRIC", "MRATIO", "COEFRMS", "CONTRAST", "RAWCONTR", "RINGING", "COEFFS", "NOLL", "TILE", "SIGSHARE"}

// readPatches reads the PATCHES table and hands each patch to fn.
func (r *partReader) readPatches(tbl *fitsio.Table, fn func(*PatchResult) error) error {
	m := r.meta
	if int(tbl.NumRows()) != r.hi-r.lo {
		return fmt.Errorf("PATCHES has %d rows, the shard %d patches", tbl.NumRows(), r.hi-r.lo)
	}
	nc := max(m.Frames*m.Modes, 1)
	lens := []int{1, 1, 1, 1, 1, 1, nc, nc, m.Patch * m.Patch, 1}
	for _, name := range append([]string{"ID", "X0", "Y0", "FLAGS", "NCOEF", "ERR"}, partVectors...) {
		if tbl.Index(name) < 0 {
			return fmt.Errorf("PATCHES lacks column %s", name)
		}
	}
	return scanRows(tbl, func(rows *fitsio.Rows) error {
		cell := map[string]any{}
		for _, k := range append([]string{"ID", "X0", "Y0", "FLAGS", "NCOEF", "ERR"}, partVectors...) {
			cell[k] = nil
		}
		if err := rows.Scan(&cell); err != nil {
			return err
		}
		v := make([][]float64, len(partVectors))
		for i, name := range partVectors {
			f, err := cellFloats(cell[name], lens[i])
			if err != nil {
				return fmt.Errorf("PATCHES column %s: %w", name, err)
			}
			v[i] = f
		}
		p, err := patchFromCells(cell, v, m.Frames*m.Modes)
		if err != nil {
			return err
		}
		return fn(p)
	})
}

// patchFromCells assembles a PatchResult from the scanned integer and text
// cells and the vector columns v (in partVectors order).
func patchFromCells(cell map[string]any, v [][]float64, nc int) (*PatchResult, error) {
	ints := map[string]int{}
	for _, k := range []string{"ID", "X0", "Y0", "FLAGS", "NCOEF"} {
		x, ok := cell[k].(int64)
		if !ok {
			return nil, fmt.Errorf("PATCHES column %s is %T, want a 64-bit integer", k, cell[k])
		}
		ints[k] = int(x)
	}
	q, _ := cell["ERR"].(string)
	msg, err := strconv.Unquote(strings.TrimSpace(q))
	if err != nil {
		return nil, fmt.Errorf("PATCHES column ERR: %q is not a quoted string", q)
	}
	k := ints["NCOEF"]
	if k != 0 && k != nc {
		return nil, fmt.Errorf("PATCHES column NCOEF is %d, want 0 or %d", k, nc)
	}
	p := &PatchResult{ID: ints["ID"], X0: ints["X0"], Y0: ints["Y0"], Flags: ints["FLAGS"], Err: msg,
		Metric: v[0][0], MetricRatio: v[1][0], CoeffRMS: v[2][0], Contrast: v[3][0], RawContrast: v[4][0], Ringing: v[5][0],
		Tile: v[8], SignalShare: v[9][0]}
	if k > 0 {
		p.Coeffs, p.Noll = v[6][:k], v[7][:k]
	}
	return p, nil
}

// scanFloats scans the current row's vector columns names (each of lens
// values).
func scanFloats(rows *fitsio.Rows, names []string, lens []int) ([][]float64, error) {
	cell := map[string]any{}
	for _, n := range names {
		cell[n] = nil
	}
	if err := rows.Scan(&cell); err != nil {
		return nil, err
	}
	out := make([][]float64, len(names))
	for i, n := range names {
		f, err := cellFloats(cell[n], lens[i])
		if err != nil {
			return nil, fmt.Errorf("column %s: %w", n, err)
		}
		out[i] = f
	}
	return out, nil
}

// cellFloats converts a scanned cell (a float64 or an array of them) to n
// values.
func cellFloats(c any, n int) ([]float64, error) {
	if f, ok := c.(float64); ok && n == 1 {
		return []float64{f}, nil
	}
	rv := reflect.ValueOf(c)
	if !rv.IsValid() || rv.Kind() != reflect.Array && rv.Kind() != reflect.Slice || rv.Len() != n {
		return nil, fmt.Errorf("cell of type %T, want %d doubles", c, n)
	}
	out := make([]float64, n)
	for i := range out {
		e := rv.Index(i)
		if e.Kind() != reflect.Float64 {
			return nil, fmt.Errorf("cell of type %T, want doubles", c)
		}
		out[i] = e.Float()
	}
	return out, nil
}
