package fits

import (
	"bytes"
	"compress/gzip"
	"encoding/binary"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestTileCompressionAstropy decodes tile-compressed images written by
// astropy (testdata/compress.py: RICE_1, GZIP_1, GZIP_2 and NOCOMPRESS;
// uint8, int16, uint16 (BZERO 32768), int32, and float32/float64 quantised
// with NO_DITHER, SUBTRACTIVE_DITHER_1 and _2, with exact zeros and a NaN;
// row tiles with a partial edge, 3-D tiles, a tile long enough for the
// dither sequence to wrap) and compares every pixel with astropy's own
// decoding: equality is exact, NaN for NaN. Planted: the tile's dither
// start index off by one ((k + ZDITHER0) mod 10000) fails every dithered
// case; restarting the sequence at 0 instead of at R[I0+1]·500 when it
// wraps fails f32_wrap_RICE_1.
func TestTileCompressionAstropy(t *testing.T) {
	py := needAstropy(t)
	dir := t.TempDir()
	out, err := exec.Command(py, "testdata/compress.py", dir).CombinedOutput()
	if err != nil {
		t.Fatalf("compress.py: %v\n%s", err, out)
	}
	names, _ := filepath.Glob(filepath.Join(dir, "*.fits"))
	if len(names) < 30 {
		t.Fatalf("compress.py wrote %d files:\n%s", len(names), out)
	}
	for _, p := range names {
		name := strings.TrimSuffix(filepath.Base(p), ".fits")
		t.Run(name, func(t *testing.T) {
			want := readF64(t, strings.TrimSuffix(p, ".fits")+".f64")
			data, err := os.ReadFile(p)
			if err != nil {
				t.Fatal(err)
			}
			f, err := Decode(data, Limits{})
			if err != nil {
				t.Fatal(err)
			}
			u, err := f.Find("IMG")
			if err != nil {
				t.Fatal(err)
			}
			if !u.Compressed() {
				t.Fatal("not read as a compressed image")
			}
			got, err := u.Image()
			if err != nil {
				t.Fatal(err)
			}
			if len(got) != len(want) {
				t.Fatalf("%d pixels, astropy %d", len(got), len(want))
			}
			bad := 0
			for i := range got {
				if got[i] != want[i] && !(math.IsNaN(got[i]) && math.IsNaN(want[i])) {
					if bad < 3 {
						t.Errorf("pixel %d: %v, astropy %v", i, got[i], want[i])
					}
					bad++
				}
			}
			if bad > 0 {
				t.Errorf("%d of %d pixels differ", bad, len(got))
			}
			checkPlanes(t, p, "IMG", want)
		})
	}
}

// checkPlanes opens path with OpenFile and compares every plane of the
// image in HDU sel, read with ReadPlane (last plane first, so a gzip file
// is read backwards too), with want, the whole image.
func checkPlanes(t *testing.T, path, sel string, want []float64) {
	t.Helper()
	f, err := OpenFile(path, Limits{})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	u, err := f.Find(sel)
	if err != nil {
		t.Fatal(err)
	}
	np, err := u.Planes()
	if err != nil {
		t.Fatal(err)
	}
	ax, _ := u.ImageAxes()
	n := ax[0] * ax[1]
	if np*n != len(want) {
		t.Fatalf("%d planes of %d pixels for %d values", np, n, len(want))
	}
	plane := make([]float64, n)
	for k := np - 1; k >= 0; k-- {
		if err := u.ReadPlane(k, plane); err != nil {
			t.Fatalf("plane %d: %v", k, err)
		}
		for i, v := range plane {
			if w := want[k*n+i]; v != w && !(math.IsNaN(v) && math.IsNaN(w)) {
				t.Fatalf("plane %d pixel %d: %v, whole image %v", k, i, v, w)
			}
		}
	}
	if err := u.ReadPlane(np, plane); err == nil {
		t.Error("plane beyond the image read without error")
	}
}

// TestReadPlane reads the compressed images of testdata (RICE_1, GZIP_1,
// GZIP_2 with 3-D tiles), a plain 4-D image and its gzip-compressed copy
// plane by plane from the file (OpenFile) and compares each plane with the
// whole image decoded in memory. Planted: the plane offset of a tile
// spanning planes left out (off = 0) fails f32_tile3d_GZIP_2; plain planes
// read from offset 0 fail the 4-D image.
func TestReadPlane(t *testing.T) {
	dir := t.TempDir()
	plain := filepath.Join(dir, "cube.fits")
	cube := make([]float64, 5*3*4*2)
	for i := range cube {
		cube[i] = float64(i*i%17) - 3.5
	}
	if err := WriteFile(plain, &Image{Dims: []int{5, 3, 4, 2}, Data: cube}); err != nil {
		t.Fatal(err)
	}
	raw, err := os.ReadFile(plain)
	if err != nil {
		t.Fatal(err)
	}
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write(raw)
	zw.Close()
	if err := os.WriteFile(plain+".gz", gz.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	names, _ := filepath.Glob("testdata/*.fits")
	for _, p := range append(names, plain, plain+".gz") {
		t.Run(filepath.Base(p), func(t *testing.T) {
			data, err := os.ReadFile(p)
			if err != nil {
				t.Fatal(err)
			}
			f, err := Decode(data, Limits{})
			if err != nil {
				t.Fatal(err)
			}
			sel := "0"
			if _, err := f.Find("IMG"); err == nil {
				sel = "IMG"
			}
			u, _ := f.Find(sel)
			want, err := u.Image()
			if err != nil {
				t.Fatal(err)
			}
			checkPlanes(t, p, sel, want)
		})
	}
}

// readF64 reads little-endian float64 values.
func readF64(t *testing.T, path string) []float64 {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	out := make([]float64, len(b)/8)
	for i := range out {
		out[i] = math.Float64frombits(binary.LittleEndian.Uint64(b[8*i:]))
	}
	return out
}

// TestDitherSequence checks the generator of FITS Standard 4.0 §10.2.2
// against the standard's own check value (the 10000th seed, 1043618065;
// ditherSequence panics otherwise) and the first value 16807/(2^31 − 1).
func TestDitherSequence(t *testing.T) {
	r := ditherSequence()
	if len(r) != 10000 || r[0] != float32(16807.0/2147483647.0) {
		t.Errorf("sequence of %d values starting %v", len(r), r[0])
	}
}

// TestRiceHandCoded decodes a Rice stream assembled by hand from the
// algorithm's description (FITS Standard 4.0 §10.4.1): 16-bit values,
// blocks of 4: first value 1000 raw; block 1 with fs = 1 holding the
// differences +1, −1, 0, +2 (mapped 2, 1, 0, 4); block 2 low-entropy (fs
// field 0: all differences 0).
func TestRiceHandCoded(t *testing.T) {
	var bits []byte
	put := func(v uint64, n int) {
		for i := n - 1; i >= 0; i-- {
			bits = append(bits, byte(v>>uint(i)&1))
		}
	}
	put(2, 4) // fs field: fs + 1 = 2
	for _, m := range []uint64{2, 1, 0, 4} {
		for z := uint64(0); z < m>>1; z++ {
			put(0, 1)
		}
		put(1, 1)
		put(m&1, 1)
	}
	put(0, 4) // low-entropy block
	data := []byte{0x03, 0xe8}
	for i := 0; i < len(bits); i += 8 {
		var b byte
		for j := 0; j < 8; j++ {
			b <<= 1
			if i+j < len(bits) {
				b |= bits[i+j]
			}
		}
		data = append(data, b)
	}
	got, err := riceDecode(data, 8, 2, 4)
	if err != nil {
		t.Fatal(err)
	}
	want := []int64{1001, 1000, 1000, 1002, 1002, 1002, 1002, 1002}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("values %v, want %v", got, want)
		}
	}
	if _, err := riceDecode(data[:3], 8, 2, 4); err == nil {
		t.Error("truncated stream: no error")
	}
}
