package restore

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"pdwave/internal/atomicfile"
	"pdwave/model/fits"
)

// Meta describes one restoration: everything the output writer needs besides
// the patches. It travels in partial files, so a merge writes the same output
// as a single run.
type Meta struct {
	Key              string            // identity of inputs, weights and settings (Identity.Key)
	Nx, Ny, Frames   int               // field size, pixels, and frames per channel
	Patch, Overlap   int               // patch side and overlap, pixels
	Basis            string            // native basis of the coefficients ("kl", "zernike", "" if none)
	Modes            int               // coefficients per frame
	Estimator        string            // how the coefficients were obtained
	ShiftX, ShiftY   float64           // defocused channel offset removed, pixels
	Cards            []fits.Card       // header cards of the input to carry over
	Settings         map[string]string // provenance settings
	Mean             []float64         // burst-mean focused calibrated image, Nx·Ny
	Inputs           []string          // input file names
	CalibrationNotes string            // what calibration was applied
}

// A part file is FITS (Standard 4.0; astropy reads it) holding one shard's
// patches, bit for bit:
//
//	primary  no data; PDPARTV (format), PDSHARD ('i/n'), PDLO, PDHI (the
//	         patch ids [lo, hi) of the shard), PDTOTAL (patches of the field)
//	META     binary table, one row, column JSON: the Meta without Mean
//	         (identity key, sizes, settings with the shard's command, the
//	         input's header cards with their types), ASCII-escaped
//	MEAN     binary table, Ny rows of Nx doubles: the burst-mean image
//	PATCHES  binary table, one row per patch in id order: ID, X0, Y0, FLAGS,
//	         NCOEF, METRIC, MRATIO, COEFRMS, CONTRAST, RAWCONTR, RINGING,
//	         COEFFS and NOLL (frames·modes doubles, NaN beyond NCOEF), TILE
//	         (Patch² doubles, the restored tile before blending), ERR (the
//	         engine's message, Go-quoted ASCII)
//
// Doubles are IEEE binary64 (TFORM D), so a merge feeds exactly the values
// a single run blends.

// partVersion is the part format written (PDPARTV).
const partVersion = 2

// PartWriter collects the patches of one shard and writes them as a part
// file on Close. Records must be written in increasing id order covering
// [lo, hi) exactly; the file appears under its final name only on a
// successful Close. The shard's tiles are held in memory until then
// (Patch² doubles per patch).
type PartWriter struct {
	path   string
	meta   *Meta
	shard  Shard
	total  int
	lo, hi int
	rows   []*PatchResult
}

// CreatePart starts a part file at path for shard sh covering patches
// [lo, hi) of the field described by meta; nothing is written before Close.
func CreatePart(path string, meta *Meta, sh Shard, lo, hi int) (*PartWriter, error) {
	g, err := NewGrid(meta.Nx, meta.Ny, meta.Patch, meta.Overlap)
	if err != nil {
		return nil, fmt.Errorf("writing %s: %w", path, err)
	}
	if lo < 0 || hi < lo || hi > g.Count() {
		return nil, fmt.Errorf("writing %s: patch range [%d, %d) outside the %d patches", path, lo, hi, g.Count())
	}
	return &PartWriter{path: path, meta: meta, shard: sh, total: g.Count(), lo: lo, hi: hi}, nil
}

// Write appends one patch; it is a Sink. Errors on an out-of-order id.
func (w *PartWriter) Write(r *PatchResult) error {
	if next := w.lo + len(w.rows); r.ID != next || r.ID >= w.hi {
		return fmt.Errorf("writing %s: patch %d out of order (want %d)", w.path, r.ID, next)
	}
	w.rows = append(w.rows, r)
	return nil
}

// Close checks that every patch of the range was written, then writes the
// part file atomically (internal/atomicfile).
func (w *PartWriter) Close() error {
	if n := len(w.rows); n != w.hi-w.lo {
		w.Abort()
		return fmt.Errorf("writing %s: only %d of %d patches written", w.path, n, w.hi-w.lo)
	}
	hdus, err := w.hdus()
	if err != nil {
		return fmt.Errorf("writing %s: %w", w.path, err)
	}
	set := atomicfile.NewSet()
	defer set.Abort()
	if err := set.AddPath(w.path, func(tmp string) error { return fits.WriteFile(tmp, hdus...) }); err != nil {
		return err
	}
	return set.Commit()
}

// Abort discards the patches; nothing is written.
func (w *PartWriter) Abort() { w.rows = nil }

// hdus builds the four HDUs of the part file.
func (w *PartWriter) hdus() ([]fits.HDU, error) {
	m := w.meta
	js, err := encodePartMeta(m)
	if err != nil {
		return nil, err
	}
	primary := &fits.Image{Cards: []fits.Card{
		{Key: "PDPARTV", Value: partVersion, Comment: "pdwave restore part format"},
		{Key: "PDSHARD", Value: w.shard.String(), Comment: "shard i/n of the patches"},
		{Key: "PDLO", Value: w.lo, Comment: "first patch id of the shard"},
		{Key: "PDHI", Value: w.hi, Comment: "patch id after the last of the shard"},
		{Key: "PDTOTAL", Value: w.total, Comment: "patches of the field"},
		{Key: "COMMENT", Comment: "Merge the parts of all shards with: pdwave restore merge --out FILE"},
	}}
	rows := make([][]float64, m.Ny)
	for y := range rows {
		rows[y] = m.Mean[y*m.Nx : (y+1)*m.Nx]
	}
	mean := &fits.Table{Name: "MEAN", Columns: []fits.Column{{Name: "MEAN", Float: rows}},
		Cards: []fits.Card{{Key: "COMMENT", Comment: "burst-mean focused calibrated image, one row per image row"}}}
	meta := &fits.Table{Name: "META", Columns: []fits.Column{{Name: "JSON", Text: []string{js}}}}
	return []fits.HDU{primary, meta, mean, w.patchTable()}, nil
}

// patchTable builds the PATCHES table of the part.
func (w *PartWriter) patchTable() *fits.Table {
	n, nc := len(w.rows), w.meta.Frames*w.meta.Modes
	ints := func() []int64 { return make([]int64, n) }
	id, x0, y0, flags, ncoef := ints(), ints(), ints(), ints(), ints()
	vec := func() [][]float64 { return make([][]float64, n) }
	metric, mratio, crms, con, rcon, ring, coeffs, noll, tile, share := vec(), vec(), vec(), vec(), vec(), vec(), vec(), vec(), vec(), vec()
	errs := make([]string, n)
	for i, r := range w.rows {
		id[i], x0[i], y0[i], flags[i], ncoef[i] = int64(r.ID), int64(r.X0), int64(r.Y0), int64(r.Flags), int64(len(r.Coeffs))
		metric[i], mratio[i], crms[i] = []float64{r.Metric}, []float64{r.MetricRatio}, []float64{r.CoeffRMS}
		con[i], rcon[i], ring[i] = []float64{r.Contrast}, []float64{r.RawContrast}, []float64{r.Ringing}
		coeffs[i], noll[i] = padNaN(r.Coeffs, max(nc, 1)), padNaN(r.Noll, max(nc, 1))
		tile[i] = r.Tile
		share[i] = []float64{r.SignalShare}
		errs[i] = strconv.QuoteToASCII(r.Err)
	}
	return &fits.Table{Name: "PATCHES", Columns: []fits.Column{
		{Name: "ID", Int: id}, {Name: "X0", Unit: "pixel", Int: x0}, {Name: "Y0", Unit: "pixel", Int: y0},
		{Name: "FLAGS", Int: flags}, {Name: "NCOEF", Int: ncoef},
		{Name: "METRIC", Float: metric}, {Name: "MRATIO", Float: mratio}, {Name: "COEFRMS", Float: crms},
		{Name: "CONTRAST", Float: con}, {Name: "RAWCONTR", Float: rcon}, {Name: "RINGING", Float: ring},
		{Name: "COEFFS", Unit: "rad", Float: coeffs}, {Name: "NOLL", Unit: "rad", Float: noll},
		{Name: "TILE", Float: tile}, {Name: "SIGSHARE", Float: share}, {Name: "ERR", Text: errs},
	}}
}

// padNaN returns v followed by NaN up to length n (v longer than n is an
// internal error caught by the reader's NCOEF check).
func padNaN(v []float64, n int) []float64 {
	out := make([]float64, max(n, len(v)))
	copy(out, v)
	for i := len(v); i < len(out); i++ {
		out[i] = math.NaN()
	}
	return out
}

// Merge reads the part files written by the shard runs of one
// restoration. It checks that the parts share one identity (saying what
// differs otherwise), come from one sharding and tile [0, total) without
// gaps or overlaps, then calls start with the common Meta (its Settings
// recording every shard's command as "command shard i/n") and grid to
// obtain a sink and feeds it every patch in increasing id order, checking
// that every part is complete. It returns the Meta and the total number of
// patches. One part's patches are held in memory at a time.
func Merge(paths []string, start func(*Meta, *Grid) (Sink, error)) (meta *Meta, total int, err error) {
	if len(paths) == 0 {
		return nil, 0, errors.New("restore: merge: no part files")
	}
	var parts []*partReader
	for _, path := range paths {
		p, err := openPart(path)
		if err != nil {
			return nil, 0, err
		}
		parts = append(parts, p)
	}
	sort.SliceStable(parts, func(i, j int) bool { return parts[i].lo < parts[j].lo })
	g, err := mergeCheck(parts)
	if err != nil {
		return nil, 0, err
	}
	m := *parts[0].meta
	m.Settings = map[string]string{}
	for k, v := range parts[0].meta.Settings {
		m.Settings[k] = v
	}
	for _, p := range parts {
		m.Settings["command shard "+p.shard.String()] = p.meta.Settings["command"]
	}
	sink, err := start(&m, g)
	if err != nil {
		return nil, 0, err
	}
	for i, p := range parts {
		id := p.lo
		err := p.patches(func(r *PatchResult) error {
			if r.ID != id || id >= p.hi {
				return fmt.Errorf("patch %d out of order (want %d)", r.ID, id)
			}
			id++
			return sink(r)
		})
		if err != nil {
			return nil, 0, err
		}
		if i == 0 {
			m.Mean = p.meta.Mean
		}
	}
	return &m, g.Count(), nil
}

// mergeCheck checks that the parts (sorted by their first patch) share one
// identity and sharding and tile the field's patches exactly, and returns
// the field's grid.
func mergeCheck(parts []*partReader) (*Grid, error) {
	first := parts[0]
	fm := first.meta
	g, err := NewGrid(fm.Nx, fm.Ny, fm.Patch, fm.Overlap)
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", first.path, err)
	}
	if first.total != g.Count() {
		return nil, fmt.Errorf("reading %s: %d patches in the header, the grid has %d", first.path, first.total, g.Count())
	}
	at := 0
	for _, p := range parts {
		if d := DiffKeys(fm.Key, p.meta.Key, "in "+first.path, "in "+p.path); d != "" {
			return nil, fmt.Errorf("restore: merge: %s and %s come from different inputs or settings: %s", first.path, p.path, d)
		}
		if p.shard.Count != first.shard.Count {
			return nil, fmt.Errorf("restore: merge: %s is shard %v, %s is shard %v", first.path, first.shard, p.path, p.shard)
		}
		if p.lo != at {
			if p.lo < at {
				return nil, fmt.Errorf("restore: merge: %s (shard %v) overlaps another part", p.path, p.shard)
			}
			return nil, fmt.Errorf("restore: merge: patches %d–%d missing (shard %s not given)", at, p.lo-1, missingShards(parts, first.shard.Count))
		}
		at = p.hi
	}
	if at != g.Count() {
		return nil, fmt.Errorf("restore: merge: patches %d–%d missing (shard %s not given)", at, g.Count()-1, missingShards(parts, first.shard.Count))
	}
	return g, nil
}

// missingShards lists the shards i/n not among the parts.
func missingShards(parts []*partReader, n int) string {
	have := map[int]bool{}
	for _, p := range parts {
		have[p.shard.Index] = true
	}
	var miss []string
	for i := 0; i < n && len(miss) < 8; i++ {
		if !have[i] {
			miss = append(miss, Shard{i, n}.String())
		}
	}
	return strings.Join(miss, ", ")
}
