package fits

import (
	"bytes"
	"compress/gzip"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"sync"
)

// The tiled-image convention (FITS Standard 4.0 §10; Pence, White &
// Seaman 2010, "Optimal compression of floating-point astronomical
// images"): an image is cut into tiles of ZTILEn pixels, each tile is one
// row of a binary table with ZIMAGE = T, compressed into the heap array of
// the COMPRESSED_DATA column by the algorithm ZCMPTYPE. Floating-point
// images are first quantised per tile to integers: value = ZZERO + ZSCALE ·
// (I − R + 0.5) with R the dither of §10.2.2, or ZZERO + ZSCALE · I without
// dither.

// Reserved quantised values (FITS Standard 4.0 §10.2.1 and §10.2.2): an
// undefined pixel (NaN), and under SUBTRACTIVE_DITHER_2 an exact zero.
const (
	quantNull = -2147483647
	quantZero = -2147483646
)

// maxRatio bounds the decompressed bytes of a tile-compressed image to
// maxRatio times its data unit: deflate cannot expand more than 1032:1
// (RFC 1951 block structure, common knowledge), Rice-coded blocks of 32
// pixels take at least 3 bits; 2100 leaves room for 8-byte pixels stored
// as 4-byte integers.
const maxRatio = 2100

// zimage is the description of a tile-compressed image.
type zimage struct {
	bitpix  int   // ZBITPIX
	axes    []int // ZNAXISn
	tile    []int // ZTILEn
	cmp     string
	quant   string // ZQUANTIZ, "" if absent
	dither0 int    // ZDITHER0
	bytepix int    // RICE_1 BYTEPIX
	block   int    // RICE_1 BLOCKSIZE
	t       *table
	// Column indices, -1 if absent.
	cData, gData, uData, cScale, cZero, cBlank int
	kScale, kZero                              float64 // ZSCALE, ZZERO keywords
	hasKScale                                  bool
	kBlank                                     int64 // ZBLANK keyword
	hasKBlank                                  bool
	sc                                         scaling // BZERO/BSCALE/BLANK of integer images
}

// zimage reads the compression keywords of h (§10.1.1–10.1.2) and checks
// them against the table: the tile count must equal the number of rows.
func (h *Unit) zimage() (*zimage, error) {
	hd := h.Header
	z := &zimage{}
	var ok bool
	var err error
	if z.bitpix, ok, err = hd.Int("ZBITPIX"); err != nil || !ok {
		return nil, fmt.Errorf("%s: missing or invalid ZBITPIX", h.what())
	}
	switch z.bitpix {
	case 8, 16, 32, 64, -32, -64:
	default:
		return nil, fmt.Errorf("%s: ZBITPIX = %d is not one of 8, 16, 32, 64, -32, -64", h.what(), z.bitpix)
	}
	naxis, ok, err := hd.Int("ZNAXIS")
	if err != nil || !ok || naxis < 0 || naxis > 999 {
		return nil, fmt.Errorf("%s: missing or invalid ZNAXIS", h.what())
	}
	z.axes, z.tile = make([]int, naxis), make([]int, naxis)
	for i := range z.axes {
		k := strconv.Itoa(i + 1)
		n, ok, err := hd.Int("ZNAXIS" + k)
		if err != nil || !ok || n < 0 {
			return nil, fmt.Errorf("%s: missing or negative ZNAXIS%s", h.what(), k)
		}
		z.axes[i] = n
		def := 1
		if i == 0 {
			def = n // default tiles are rows (§10.1.1)
		}
		t, ok, err := hd.Int("ZTILE" + k)
		if err != nil || (ok && t < 1) {
			return nil, fmt.Errorf("%s: invalid ZTILE%s", h.what(), k)
		}
		if !ok {
			t = def
		}
		z.tile[i] = max(min(t, n), 1)
	}
	if err := z.readKeys(hd, h.what()); err != nil {
		return nil, err
	}
	if z.t, err = h.table(); err != nil {
		return nil, err
	}
	if err := z.findColumns(h.what()); err != nil {
		return nil, err
	}
	return z, nil
}

// readKeys reads ZCMPTYPE, ZNAMEi/ZVALi, ZQUANTIZ, ZDITHER0, the ZSCALE,
// ZZERO, ZBLANK keywords and the image's BZERO/BSCALE/BLANK.
func (z *zimage) readKeys(hd *Header, what string) error {
	var ok bool
	var err error
	if z.cmp, ok, err = hd.String("ZCMPTYPE"); err != nil || !ok {
		return fmt.Errorf("%s: missing or invalid ZCMPTYPE", what)
	}
	z.cmp = strings.ToUpper(strings.TrimSpace(z.cmp))
	z.bytepix, z.block = 4, 32 // RICE_1 defaults (§10.4.1)
	if z.bitpix == 8 || z.bitpix == 16 {
		z.bytepix = z.bitpix / 8
	}
	for i := 1; i <= 999; i++ {
		name, ok, _ := hd.String("ZNAME" + strconv.Itoa(i))
		if !ok {
			break
		}
		v, has, err := hd.Int("ZVAL" + strconv.Itoa(i))
		if err != nil || !has {
			continue // parameters of other algorithms may be real
		}
		switch strings.ToUpper(strings.TrimSpace(name)) {
		case "BYTEPIX":
			z.bytepix = v
		case "BLOCKSIZE":
			z.block = v
		}
	}
	if q, ok, _ := hd.String("ZQUANTIZ"); ok {
		z.quant = strings.ToUpper(strings.TrimSpace(q))
	}
	z.dither0 = 1
	if d, ok, err := hd.Int("ZDITHER0"); err != nil {
		return fmt.Errorf("%s: %w", what, err)
	} else if ok {
		z.dither0 = d
	}
	if z.kScale, z.hasKScale, err = hd.Number("ZSCALE"); err != nil {
		return fmt.Errorf("%s: %w", what, err)
	}
	if z.kZero, _, err = hd.Number("ZZERO"); err != nil {
		return fmt.Errorf("%s: %w", what, err)
	}
	b, ok, err := hd.Int("ZBLANK")
	if err != nil {
		return fmt.Errorf("%s: %w", what, err)
	}
	z.kBlank, z.hasKBlank = int64(b), ok
	if z.sc, err = readScaling(hd, z.bitpix, "BZERO", "BSCALE", "BLANK"); err != nil {
		return fmt.Errorf("%s: %w", what, err)
	}
	return nil
}

// findColumns locates the convention's columns (§10.1.2).
func (z *zimage) findColumns(what string) error {
	t := z.t
	z.cData, z.gData, z.uData = t.col("COMPRESSED_DATA"), t.col("GZIP_COMPRESSED_DATA"), t.col("UNCOMPRESSED_DATA")
	z.cScale, z.cZero, z.cBlank = t.col("ZSCALE"), t.col("ZZERO"), t.col("ZBLANK")
	if z.cData < 0 {
		return fmt.Errorf("%s: no COMPRESSED_DATA column", what)
	}
	for _, ci := range []int{z.cData, z.gData, z.uData} {
		if ci >= 0 && t.cols[ci].code != 'P' && t.cols[ci].code != 'Q' {
			return fmt.Errorf("%s: column %s is not a variable-length array (TFORM 1P or 1Q)", what, t.cols[ci].name)
		}
	}
	tiles := 1
	for i, n := range z.axes {
		if n == 0 {
			tiles = 0
			break
		}
		per := (n + z.tile[i] - 1) / z.tile[i]
		if per > t.rows || tiles > t.rows/per {
			tiles = t.rows + 1 // more tiles than rows; no overflow
			break
		}
		tiles *= per
	}
	if len(z.axes) == 0 {
		tiles = 0
	}
	if tiles != t.rows {
		return fmt.Errorf("%s: %d rows but a %v image in %v tiles needs %s", what, t.rows, z.axes, z.tile, tileCount(tiles, t.rows))
	}
	return nil
}

// quantised reports whether the integers of the tiles are quantised
// floating-point values to be scaled back (a floating-point ZBITPIX with a
// ZSCALE column or keyword).
func (z *zimage) quantised() bool {
	return z.bitpix < 0 && (z.cScale >= 0 || z.hasKScale)
}

// decompress decodes the whole image of the tile-compressed HDU h; errors
// name the HDU.
func (h *Unit) decompress() ([]float64, error) {
	z, err := h.zimage()
	if err != nil {
		return nil, err
	}
	n, err := h.pixelCount(z.axes)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", h.what(), err)
	}
	w := z.bitpix / 8
	if w < 0 {
		w = -w
	}
	if int64(n)*int64(w) > maxRatio*int64(h.size)+blockSize {
		return nil, fmt.Errorf("%s: a %v image of %d-byte pixels in a %d-byte data unit is beyond any compression ratio", h.what(), z.axes, w, h.size)
	}
	out := make([]float64, n)
	for k := 0; k < z.t.rows; k++ {
		if err := z.decodeTile(k, out); err != nil {
			return nil, fmt.Errorf("%s: tile %d (%s): %w", h.what(), k+1, z.cmp, err)
		}
	}
	return out, nil
}

// decompressPlane decodes plane k (see ReadPlane) of the tile-compressed
// image h into dst, decoding only the tiles that overlap the plane (a tile
// spanning several planes is decoded again for each).
func (h *Unit) decompressPlane(k int, dst []float64) error {
	z, err := h.zimage()
	if err != nil {
		return err
	}
	w := z.bitpix / 8
	if w < 0 {
		w = -w
	}
	if int64(len(dst))*int64(w) > maxRatio*int64(h.size)+blockSize {
		return fmt.Errorf("%s: a %v image of %d-byte pixels in a %d-byte data unit is beyond any compression ratio", h.what(), z.axes, w, h.size)
	}
	// The plane's coordinates along the axes beyond the second, and the
	// tile index of the plane's first tile.
	nt := make([]int, len(z.axes))
	for i, n := range z.axes {
		nt[i] = (n + z.tile[i] - 1) / z.tile[i]
	}
	coord := make([]int, len(z.axes))
	base, stride, rest := 0, nt[0]*nt[1], k
	for i := 2; i < len(z.axes); i++ {
		coord[i] = rest % z.axes[i]
		rest /= z.axes[i]
		base += coord[i] / z.tile[i] * stride
		stride *= nt[i]
	}
	for t1 := 0; t1 < nt[1]; t1++ {
		for t0 := 0; t0 < nt[0]; t0++ {
			tk := base + t0 + nt[0]*t1
			if err := z.decodeTilePlane(tk, coord, dst); err != nil {
				return fmt.Errorf("%s: tile %d (%s): %w", h.what(), tk+1, z.cmp, err)
			}
		}
	}
	return nil
}

// decodeTilePlane decodes tile k and copies its pixels in the plane of
// coordinates coord (axes beyond the second) into dst, that plane.
func (z *zimage) decodeTilePlane(k int, coord []int, dst []float64) error {
	first, size, vals, err := z.tilePixels(k)
	if err != nil {
		return err
	}
	// Offset of the plane inside the tile, first axis fastest.
	off, stride := 0, size[0]*size[1]
	for i := 2; i < len(size); i++ {
		off += (coord[i] - first[i]) * stride
		stride *= size[i]
	}
	nx := z.axes[0]
	for y := 0; y < size[1]; y++ {
		copy(dst[(first[1]+y)*nx+first[0]:(first[1]+y)*nx+first[0]+size[0]], vals[off+y*size[0]:off+(y+1)*size[0]])
	}
	return nil
}

// tilePixels returns the box of tile k (tileBox) and its decoded values,
// first axis fastest.
func (z *zimage) tilePixels(k int) (first, size []int, vals []float64, err error) {
	first, size = z.tileBox(k)
	vals, err = z.tileValues(k, boxPixels(size))
	return first, size, vals, err
}

// boxPixels returns the number of pixels of a box of the given extents.
func boxPixels(size []int) int {
	np := 1
	for _, s := range size {
		np *= s
	}
	return np
}

// tileBox returns the first pixel and extent of tile k (0-based, first
// axis fastest) along every axis.
func (z *zimage) tileBox(k int) (first, size []int) {
	first, size = make([]int, len(z.axes)), make([]int, len(z.axes))
	for i, n := range z.axes {
		nt := (n + z.tile[i] - 1) / z.tile[i]
		first[i] = (k % nt) * z.tile[i]
		k /= nt
		size[i] = min(z.tile[i], n-first[i])
	}
	return first, size
}

// decodeTile decodes tile k into out, the whole image.
func (z *zimage) decodeTile(k int, out []float64) error {
	first, size, vals, err := z.tilePixels(k)
	if err != nil {
		return err
	}
	np := min(len(vals), boxPixels(size))
	// Scatter: tile pixel p at offset idx in the image, first axis fastest.
	pos := make([]int, len(size))
	for p := 0; p < np; p++ {
		idx, stride := 0, 1
		for i := range size {
			idx += (first[i] + pos[i]) * stride
			stride *= z.axes[i]
		}
		out[idx] = vals[p]
		for i := range pos {
			pos[i]++
			if pos[i] < size[i] {
				break
			}
			pos[i] = 0
		}
	}
	return nil
}

// tileValues returns the np physical values of tile k.
func (z *zimage) tileValues(k, np int) ([]float64, error) {
	t := z.t
	raw, _, err := t.array(k, z.cData)
	if err != nil {
		return nil, err
	}
	if len(raw) > 0 {
		ints, floats, err := z.decodeData(raw, t.cols[z.cData].elem, np)
		if err != nil {
			return nil, err
		}
		if floats != nil {
			return floats, nil
		}
		return z.physical(k, ints)
	}
	// A tile that could not be quantised is stored losslessly (§10.2):
	// gzip-compressed or raw values of the image's own type.
	if z.gData >= 0 {
		g, _, err := t.array(k, z.gData)
		if err != nil {
			return nil, err
		}
		if len(g) > 0 {
			b, err := gunzipTile(g, np*8)
			if err != nil {
				return nil, err
			}
			return rawValues(b, np, z.bitpix, z.sc)
		}
	}
	if z.uData >= 0 {
		u, n, err := t.array(k, z.uData)
		if err != nil {
			return nil, err
		}
		if n > 0 {
			return rawValues(u, np, elemBitpix(t.cols[z.uData].elem), z.sc)
		}
	}
	return nil, fmt.Errorf("row %d holds no data", k+1)
}

// decodeData decompresses one tile's COMPRESSED_DATA bytes into np
// integers (integer images and quantised floats) or np floating-point
// values (unquantised floating-point images).
func (z *zimage) decodeData(raw []byte, elem byte, np int) ([]int64, []float64, error) {
	var b []byte
	switch z.cmp {
	case "RICE_1", "RICE_ONE":
		if z.bitpix < 0 && !z.quantised() {
			return nil, nil, fmt.Errorf("RICE_1 of unquantised floating-point pixels")
		}
		ints, err := riceDecode(raw, np, z.bytepix, z.block)
		return ints, nil, err
	case "GZIP_1", "GZIP_2":
		var err error
		if b, err = gunzipTile(raw, np*8); err != nil {
			return nil, nil, err
		}
	case "NOCOMPRESS":
		b = raw
	case "PLIO_1", "HCOMPRESS_1":
		return nil, nil, fmt.Errorf("compression %s is not supported (RICE_1, GZIP_1, GZIP_2 and NOCOMPRESS are)", z.cmp)
	default:
		return nil, nil, fmt.Errorf("unknown compression ZCMPTYPE = '%s'", z.cmp)
	}
	if np == 0 || len(b)%np != 0 {
		return nil, nil, fmt.Errorf("%d bytes for %d pixels", len(b), np)
	}
	w := len(b) / np
	if w != 1 && w != 2 && w != 4 && w != 8 {
		return nil, nil, fmt.Errorf("%d bytes a pixel", w)
	}
	if z.cmp == "GZIP_2" {
		b = unshuffle(b, w)
	}
	if z.bitpix < 0 && !z.quantised() {
		if w != 4 && w != 8 {
			return nil, nil, fmt.Errorf("%d-byte floating-point pixels", w)
		}
		f, err := rawValues(b, np, -8*w, scaling{scale: 1})
		return nil, f, err
	}
	return bigInts(b, np, w), nil, nil
}

// physical scales the integers of tile k: quantised floats are restored
// with the tile's ZSCALE/ZZERO and dither, integers get BZERO/BSCALE; ZBLANK
// (column or keyword) and BLANK mark undefined pixels (NaN).
func (z *zimage) physical(k int, ints []int64) ([]float64, error) {
	blank, hasBlank := z.kBlank, z.hasKBlank
	if z.cBlank >= 0 {
		v, err := z.t.scalar(k, z.cBlank)
		if err != nil {
			return nil, err
		}
		blank, hasBlank = int64(v), true
	}
	out := make([]float64, len(ints))
	if !z.quantised() {
		for i, v := range ints {
			if hasBlank && v == blank {
				out[i] = math.NaN()
				continue
			}
			out[i] = z.sc.apply(v)
		}
		return out, nil
	}
	scale, zero := z.kScale, z.kZero
	var err error
	if z.cScale >= 0 {
		if scale, err = z.t.scalar(k, z.cScale); err != nil {
			return nil, err
		}
	}
	if z.cZero >= 0 {
		if zero, err = z.t.scalar(k, z.cZero); err != nil {
			return nil, err
		}
	}
	if err := z.unquantise(out, ints, k, scale, zero, blank, hasBlank); err != nil {
		return nil, err
	}
	return out, nil
}

// unquantise restores quantised floating-point values (FITS Standard 4.0
// §10.2): without dither F = ZZERO + ZSCALE·I; with SUBTRACTIVE_DITHER_1
// and _2, F = ZZERO + ZSCALE·(I − R + 0.5) with R from ditherSequence,
// starting for tile k (0-based) at index I0 = (k + ZDITHER0 − 1) mod 10000,
// the pixel offset I1 = int(R[I0]·500), and I1 advanced for every pixel; at
// 10000 I0 advances and I1 starts again from R[I0]. Under
// SUBTRACTIVE_DITHER_2 the value quantZero is exactly 0. Values of a
// 32-bit image are rounded to float32 as the writer's type.
func (z *zimage) unquantise(out []float64, ints []int64, k int, scale, zero float64, blank int64, hasBlank bool) error {
	method := 0
	switch z.quant {
	case "", "NO_DITHER", "NONE":
	case "SUBTRACTIVE_DITHER_1":
		method = 1
	case "SUBTRACTIVE_DITHER_2":
		method = 2
	default:
		return fmt.Errorf("unknown ZQUANTIZ = '%s'", z.quant)
	}
	if method > 0 && (z.dither0 < 1 || z.dither0 > 10000) {
		return fmt.Errorf("ZDITHER0 = %d is outside 1..10000", z.dither0)
	}
	r := ditherSequence()
	i0 := (k + z.dither0 - 1) % len(r)
	i1 := int(r[i0] * 500)
	for i, v := range ints {
		switch {
		case hasBlank && v == blank:
			out[i] = math.NaN()
		case method == 2 && v == quantZero:
			out[i] = 0
		case method == 0:
			out[i] = zero + scale*float64(v)
		default:
			out[i] = (float64(v)-float64(r[i1])+0.5)*scale + zero
		}
		if z.bitpix == -32 {
			out[i] = float64(float32(out[i]))
		}
		if method > 0 {
			i1++
			if i1 == len(r) {
				i0 = (i0 + 1) % len(r)
				i1 = int(r[i0] * 500)
			}
		}
	}
	return nil
}

var (
	ditherOnce sync.Once
	ditherSeq  []float32
)

// ditherSequence returns the 10000 dither values of FITS Standard 4.0
// §10.2.2: the Park & Miller (1988) minimal standard generator,
// seed_{i+1} = 16807·seed_i mod (2^31 − 1) from seed_0 = 1, computed in
// double precision and stored as single-precision seed/(2^31 − 1). The
// standard's check: the 10000th seed is 1043618065 (ditherSequence panics
// if not, which would be a bug here).
func ditherSequence() []float32 {
	ditherOnce.Do(func() {
		const a, m = 16807.0, 2147483647.0
		seed := 1.0
		ditherSeq = make([]float32, 10000)
		for i := range ditherSeq {
			t := a * seed
			seed = t - m*math.Trunc(t/m)
			ditherSeq[i] = float32(seed / m)
		}
		if int64(seed) != 1043618065 {
			panic(fmt.Sprintf("fits: dither sequence ends with seed %v, want 1043618065", seed))
		}
	})
	return ditherSeq
}

// gunzipTile decompresses one tile, failing beyond max bytes.
func gunzipTile(data []byte, max int) ([]byte, error) {
	zr, err := gzip.NewReader(bytes.NewReader(data))
	if err != nil {
		return nil, fmt.Errorf("gzip: %w", err)
	}
	defer zr.Close()
	var buf bytes.Buffer
	n, err := io.Copy(&buf, io.LimitReader(zr, int64(max)+1))
	if err != nil {
		return nil, fmt.Errorf("gzip: %w", err)
	}
	if n > int64(max) {
		return nil, fmt.Errorf("gzip: more than the %d bytes of the tile", max)
	}
	return buf.Bytes(), nil
}

// unshuffle undoes the byte shuffling of GZIP_2 (§10.4.3): the most
// significant bytes of all pixels first, then the next, and so on.
func unshuffle(b []byte, w int) []byte {
	n := len(b) / w
	out := make([]byte, len(b))
	for j := 0; j < w; j++ {
		for i := 0; i < n; i++ {
			out[i*w+j] = b[j*n+i]
		}
	}
	return out
}

// bigInts decodes n big-endian integers of w bytes (unsigned for w = 1).
func bigInts(b []byte, n, w int) []int64 {
	out := make([]int64, n)
	be := binary.BigEndian
	for i := range out {
		switch w {
		case 1:
			out[i] = int64(b[i])
		case 2:
			out[i] = int64(int16(be.Uint16(b[2*i:])))
		case 4:
			out[i] = int64(int32(be.Uint32(b[4*i:])))
		default:
			out[i] = int64(be.Uint64(b[8*i:]))
		}
	}
	return out
}

// rawValues decodes n big-endian values of BITPIX bitpix with sc.
func rawValues(b []byte, n, bitpix int, sc scaling) ([]float64, error) {
	out := make([]float64, n)
	if err := decodeBig(out, b, bitpix, sc); err != nil {
		return nil, err
	}
	return out, nil
}

// elemBitpix is the BITPIX equivalent of a table element type.
func elemBitpix(code byte) int {
	switch code {
	case 'B':
		return 8
	case 'I':
		return 16
	case 'J':
		return 32
	case 'K':
		return 64
	case 'E':
		return -32
	case 'D':
		return -64
	}
	return 0
}

// tileCount describes the needed number of tiles for a message.
func tileCount(tiles, rows int) string {
	if tiles > rows {
		return "more"
	}
	return strconv.Itoa(tiles)
}
