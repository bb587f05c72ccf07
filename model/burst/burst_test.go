package burst

import (
	"encoding/binary"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"pdwave/model/fits"
	"pdwave/model/instrument"
)

const arcsec = math.Pi / (180 * 3600)

// testBurst returns a deterministic burst with every optional part set.
func testBurst(nx, ny, frames, modes int) *Burst {
	b := New(nx, ny, frames)
	for c := 0; c < 2; c++ {
		for f := 0; f < frames; f++ {
			for i := range b.Data[c][f] {
				b.Data[c][f][i] = 1000 + 37.25*float64(c) + 3.5*float64(f) + 0.125*float64(i%17) - 0.0625*float64(i/7)
			}
		}
	}
	s := instrument.Some[float64]
	b.Optics = Optics{Wavelength: s(600e-9), PixelScale: s(0.12 * arcsec), Diameter: s(0.5), Obscuration: s(0.15), DiversityPV: s(1)}
	b.Cards = []fits.Card{
		{Key: "TELESCOP", Value: "demo", Comment: "invented test telescope"},
		{Key: "DATE-OBS", Value: "2026-01-02T03:04:05.678"},
		{Key: "CTYPE1", Value: "HPLN-TAN"},
		{Key: "CUNIT1", Value: "arcsec"},
		{Key: "CRPIX1", Value: 4.5},
		{Key: "CRVAL1", Value: -120.25},
		{Key: "CDELT1", Value: -0.12},
		{Key: "CTYPE2", Value: "HPLT-TAN"},
		{Key: "CUNIT2", Value: "arcsec"},
		{Key: "CRPIX2", Value: 3.5},
		{Key: "CRVAL2", Value: 200.0},
		{Key: "CDELT2", Value: 0.12},
		{Key: "PC1_2", Value: 0.0},
		{Key: "EXPTIME", Value: 0.001, Comment: "s"},
		{Key: "NFRAMES", Value: frames},
		{Key: "FLIPPED", Value: false},
		{Key: "OBSERVER", Value: "O'Neill"},
		{Key: "HISTORY", Comment: "taken with the demo camera"},
	}
	b.Truth = &Truth{Basis: "kl", Modes: modes}
	for f := 0; f < frames; f++ {
		row := make([]float64, modes)
		noll := make([]float64, modes)
		for m := range row {
			row[m] = 0.1*float64(f) - 0.01*float64(m) + 1e-17
			noll[m] = -row[m] / 3
		}
		b.Truth.Coeffs = append(b.Truth.Coeffs, row)
		b.Truth.Noll = append(b.Truth.Noll, noll)
	}
	b.Object = make([]float64, nx*ny)
	for i := range b.Object {
		b.Object[i] = float64(i) * 0.5
	}
	return b
}

func cardValue(cards []fits.Card, key string) (any, bool) {
	for _, c := range cards {
		if c.Key == key {
			return c.Value, true
		}
	}
	return nil, false
}

func relClose(a, b, tol float64) bool {
	return math.Abs(a-b) <= tol*math.Max(math.Abs(a), math.Abs(b))
}

func TestRoundTripFloat32(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "burst.fits")
	in := testBurst(9, 7, 3, 5)
	if err := Write(path, in, fits.Provenance("0.0-test", map[string]string{"seed": "1"})); err != nil {
		t.Fatal(err)
	}
	out, err := Read(path)
	if err != nil {
		t.Fatal(err)
	}
	if out.Nx != 9 || out.Ny != 7 || out.Frames != 3 {
		t.Fatalf("size %d×%d×%d", out.Nx, out.Ny, out.Frames)
	}
	for c := 0; c < 2; c++ {
		for f := 0; f < 3; f++ {
			for i, v := range in.Data[c][f] {
				// Written as float32: exact for these values (multiples of 1/16 below 2^12).
				if got := out.Data[c][f][i]; got != v {
					t.Fatalf("channel %d frame %d pixel %d: %v, want %v", c, f, i, got, v)
				}
			}
		}
	}
	o := out.Optics
	if !relClose(o.Wavelength.V, 600e-9, 1e-14) || !relClose(o.PixelScale.V, 0.12*arcsec, 1e-14) ||
		o.Diameter.V != 0.5 || o.Obscuration.V != 0.15 || o.DiversityPV.V != 1 {
		t.Errorf("optics %+v", o)
	}
	for _, want := range []struct {
		key string
		val any
	}{{"TELESCOP", "demo"}, {"DATE-OBS", "2026-01-02T03:04:05.678"}, {"CRPIX1", 4.5}, {"CRVAL1", -120.25},
		{"CTYPE1", "HPLN-TAN"}, {"NFRAMES", 3}, {"FLIPPED", false}, {"OBSERVER", "O'Neill"}, {"EXPTIME", 0.001},
		{"PDWVERS", "0.0-test"}, {"CDELT1", -0.12}, {"CUNIT1", "arcsec"}, {"CUNIT2", "arcsec"}} {
		got, ok := cardValue(out.Cards, want.key)
		if !ok {
			t.Errorf("card %s missing", want.key)
			continue
		}
		if f, isF := want.val.(float64); isF {
			if g, _ := got.(float64); !relClose(g, f, 1e-15) {
				t.Errorf("card %s = %v, want %v", want.key, got, want.val)
			}
		} else if got != want.val {
			t.Errorf("card %s = %#v, want %#v", want.key, got, want.val)
		}
	}
	if _, ok := cardValue(out.Cards, "BURSTVER"); ok {
		t.Error("structural BURSTVER leaked into Cards")
	}
	hist := 0
	for _, c := range out.Cards {
		if c.Key == "HISTORY" && (c.Comment == "taken with the demo camera" || c.Comment == "pdwave: seed = 1") {
			hist++
		}
	}
	if hist != 2 {
		t.Errorf("found %d of 2 HISTORY cards: %+v", hist, out.Cards)
	}
	if out.Truth == nil || out.Truth.Basis != "kl" || out.Truth.Modes != 5 {
		t.Fatalf("truth %+v", out.Truth)
	}
	for f := range in.Truth.Coeffs {
		for m := range in.Truth.Coeffs[f] {
			if out.Truth.Coeffs[f][m] != in.Truth.Coeffs[f][m] || out.Truth.Noll[f][m] != in.Truth.Noll[f][m] {
				t.Fatalf("truth frame %d mode %d differs", f, m)
			}
		}
	}
	for i, v := range in.Object {
		if out.Object[i] != v {
			t.Fatalf("object pixel %d: %v, want %v", i, out.Object[i], v)
		}
	}
	// Writing what was read must give the same burst again (cards carried).
	path2 := filepath.Join(dir, "again.fits")
	if err := Write(path2, out, nil); err != nil {
		t.Fatal(err)
	}
	again, err := Read(path2)
	if err != nil {
		t.Fatal(err)
	}
	if again.Optics != out.Optics || len(again.Cards) != len(out.Cards) {
		t.Errorf("second round trip: optics %+v vs %+v, %d vs %d cards", again.Optics, out.Optics, len(again.Cards), len(out.Cards))
	}
	if v, _ := cardValue(again.Cards, "CDELT1"); v != -0.12 {
		t.Errorf("CDELT1 sign/unit not kept: %v", v)
	}
	entries, _ := os.ReadDir(dir)
	for _, e := range entries {
		if strings.Contains(e.Name(), ".tmp-") {
			t.Errorf("temporary file left behind: %s", e.Name())
		}
	}
}

// rawFITS writes a primary image with the given BITPIX and raw big-endian
// pixel bytes, plus extra header cards. It uses the package's own card
// formatter; the formatter itself is checked by fitsverify and astropy.
func rawFITS(t *testing.T, path string, bitpix int, axes []int, cards []fits.Card, raw []byte) {
	t.Helper()
	hdr := []fits.Card{{Key: "SIMPLE", Value: true}, {Key: "BITPIX", Value: bitpix}, {Key: "NAXIS", Value: len(axes)}}
	for i, a := range axes {
		hdr = append(hdr, fits.Card{Key: "NAXIS" + strconv.Itoa(i+1), Value: a})
	}
	h, err := fits.EncodeHeader(append(hdr, cards...))
	if err != nil {
		t.Fatal(err)
	}
	data := append(h, raw...)
	data = append(data, make([]byte, (len(raw)+blockSize-1)/blockSize*blockSize-len(raw))...)
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
}

func TestReadIntegerScaled(t *testing.T) {
	dir := t.TempDir()
	nx, ny, frames := 5, 4, 2
	n := nx * ny * frames * 2

	// Unsigned 16-bit camera data: BITPIX 16, BZERO 32768 (FITS Standard 4.0 §5.3, Table 11).
	raw16 := make([]byte, 2*n)
	want16 := make([]float64, n)
	for i := 0; i < n; i++ {
		u := uint16((i * 2113) % 65536)
		if i == 1 {
			u = 65535
		}
		want16[i] = float64(u)
		binary.BigEndian.PutUint16(raw16[2*i:], u^0x8000) // stored = u − 32768
	}
	p16 := filepath.Join(dir, "u16.fits")
	rawFITS(t, p16, 16, []int{nx, ny, frames, 2}, []fits.Card{{Key: "BZERO", Value: 32768}, {Key: "BSCALE", Value: 1}}, raw16)

	// Signed 32-bit with BSCALE/BZERO: physical = 10 + 0.5·stored.
	raw32 := make([]byte, 4*n)
	want32 := make([]float64, n)
	for i := 0; i < n; i++ {
		s := int32(i*7919 - 300)
		want32[i] = 10 + 0.5*float64(s)
		binary.BigEndian.PutUint32(raw32[4*i:], uint32(s))
	}
	p32 := filepath.Join(dir, "i32.fits")
	rawFITS(t, p32, 32, []int{nx, ny, frames, 2}, []fits.Card{{Key: "BZERO", Value: 10.0}, {Key: "BSCALE", Value: 0.5}}, raw32)

	// Float64.
	raw64 := make([]byte, 8*n)
	want64 := make([]float64, n)
	for i := 0; i < n; i++ {
		want64[i] = math.Sqrt(float64(i)) * 1e-3
		binary.BigEndian.PutUint64(raw64[8*i:], math.Float64bits(want64[i]))
	}
	p64 := filepath.Join(dir, "f64.fits")
	rawFITS(t, p64, -64, []int{nx, ny, frames, 2}, nil, raw64)

	for _, tc := range []struct {
		path string
		want []float64
	}{{p16, want16}, {p32, want32}, {p64, want64}} {
		b, err := Read(tc.path)
		if err != nil {
			t.Fatal(err)
		}
		k := 0
		for c := 0; c < 2; c++ {
			for f := 0; f < frames; f++ {
				for i, v := range b.Data[c][f] {
					if v != tc.want[k] {
						t.Fatalf("%s: channel %d frame %d pixel %d = %v, want %v", filepath.Base(tc.path), c, f, i, v, tc.want[k])
					}
					k++
				}
			}
		}
	}
}

func TestReadPair(t *testing.T) {
	dir := t.TempDir()
	nx, ny, frames := 6, 5, 3
	var paths [2]string
	for c := 0; c < 2; c++ {
		data := make([]float64, nx*ny*frames)
		for i := range data {
			data[i] = float64(100*c + i)
		}
		cards := []fits.Card{{Key: "WAVELNTH", Value: 6000.0}, {Key: "WAVEUNIT", Value: -10}, {Key: "CDELT1", Value: 0.12 / 3600}, {Key: "CDELT2", Value: 0.12 / 3600}}
		if c == 1 {
			cards = []fits.Card{{Key: "DIVPV", Value: 1.25}}
		}
		paths[c] = filepath.Join(dir, "ch"+strconv.Itoa(c)+".fits")
		if err := fits.WriteFile(paths[c], &fits.Image{Dims: []int{nx, ny, frames}, Data: data, Cards: cards}); err != nil {
			t.Fatal(err)
		}
	}
	b, err := ReadPair(paths[0], paths[1])
	if err != nil {
		t.Fatal(err)
	}
	if b.Nx != nx || b.Ny != ny || b.Frames != frames {
		t.Fatalf("size %d×%d×%d", b.Nx, b.Ny, b.Frames)
	}
	for c := 0; c < 2; c++ {
		for f := 0; f < frames; f++ {
			for i, v := range b.Data[c][f] {
				if want := float64(100*c + f*nx*ny + i); v != want {
					t.Fatalf("channel %d frame %d pixel %d = %v, want %v", c, f, i, v, want)
				}
			}
		}
	}
	// 6000 Å = 600 nm; CDELT in degrees (no CUNIT: the WCS default).
	if !relClose(b.Optics.Wavelength.V, 600e-9, 1e-14) || !relClose(b.Optics.PixelScale.V, 0.12*arcsec, 1e-12) || b.Optics.DiversityPV.V != 1.25 {
		t.Errorf("optics %+v", b.Optics)
	}
}

func TestOpticsFill(t *testing.T) {
	s := instrument.Some[float64]
	// An explicit 0 (OBSCUR = 0) is kept; unset fields come from the defaults.
	got := Optics{Wavelength: s(1), Obscuration: s(0), DiversityPV: s(2)}.Fill(Optics{Wavelength: s(5), PixelScale: s(3), Diameter: s(4), Obscuration: s(0.3), DiversityPV: s(9)})
	if got != (Optics{Wavelength: s(1), PixelScale: s(3), Diameter: s(4), Obscuration: s(0), DiversityPV: s(2)}) {
		t.Errorf("Fill: %+v", got)
	}
}

// TestBadInput: every malformed input gives an error naming the problem.
func TestBadInput(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.fits")
	if err := Write(good, testBurst(8, 8, 4, 3), nil); err != nil {
		t.Fatal(err)
	}
	goodBytes, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	f32 := func(n int, bad map[int]float32) []byte {
		raw := make([]byte, 4*n)
		for i := 0; i < n; i++ {
			v := float32(i)
			if b, ok := bad[i]; ok {
				v = b
			}
			binary.BigEndian.PutUint32(raw[4*i:], math.Float32bits(v))
		}
		return raw
	}
	file := func(name string, bitpix int, axes []int, cards []fits.Card, raw []byte) string {
		p := filepath.Join(dir, name)
		rawFITS(t, p, bitpix, axes, cards, raw)
		return p
	}
	bytesFile := func(name string, data []byte) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	nan := float32(math.NaN())
	inf := float32(math.Inf(1))
	// Pixel index of channel 2, frame 3, (x=2, y=1) in a 4×3×3×2 cube.
	bad := 1*3*12 + 2*12 + 1
	withTruth := func(rows int) string {
		b := testBurst(4, 3, 3, 2)
		b.Truth.Coeffs = b.Truth.Coeffs[:rows]
		b.Truth.Noll = nil
		p := filepath.Join(dir, "truth"+strconv.Itoa(rows)+".fits")
		// Write validates, so build the file with WriteFile directly.
		cube := make([]float64, 0, 72)
		for c := 0; c < 2; c++ {
			for f := 0; f < 3; f++ {
				cube = append(cube, b.Data[c][f]...)
			}
		}
		if err := fits.WriteFile(p, &fits.Image{Dims: []int{4, 3, 3, 2}, Data: cube},
			&fits.Table{Name: "TRUTH", Columns: []fits.Column{{Name: "COEFFS", Float: b.Truth.Coeffs}}, Cards: []fits.Card{{Key: "BASIS", Value: "kl"}, {Key: "NMODES", Value: 2}}}); err != nil {
			t.Fatal(err)
		}
		return p
	}
	cases := []struct {
		name string
		path string
		want string
	}{
		{"missing file", filepath.Join(dir, "nope.fits"), "no such file"},
		{"empty", bytesFile("empty.fits", nil), "empty file"},
		{"not FITS", bytesFile("text.fits", []byte(strings.Repeat("hello world, not a FITS file\n", 200))), "not a FITS file"},
		{"truncated data", bytesFile("trunc.fits", goodBytes[:len(goodBytes)-3*blockSize-100]), "truncated"},
		{"truncated header", bytesFile("trunchdr.fits", goodBytes[:1000]), "truncated"},
		{"NAXIS 2", file("n2.fits", -32, []int{4, 3}, nil, f32(12, nil)), "NAXIS = 2"},
		{"NAXIS 3 one channel", file("n3.fits", -32, []int{4, 3, 2}, nil, f32(24, nil)), "one channel only"},
		{"NAXIS4 1 one channel", file("n41.fits", -32, []int{4, 3, 2, 1}, nil, f32(24, nil)), "one channel only"},
		{"NAXIS4 3", file("n43.fits", -32, []int{4, 3, 2, 3}, nil, f32(72, nil)), "NAXIS4 = 3"},
		{"zero frames", file("zero.fits", -32, []int{4, 3, 0, 2}, nil, nil), "no frames"},
		{"empty images", file("zeronx.fits", -32, []int{0, 3, 2, 2}, nil, nil), "empty"},
		{"NaN pixel", file("nan.fits", -32, []int{4, 3, 3, 2}, nil, f32(72, map[int]float32{bad: nan})), "channel 2 (defocused) frame 3: 1 of the 4×3 pixels (8.3 %) are undefined (NaN, Inf, BLANK) or marked bad, the first at (x=2, y=1)"},
		{"Inf pixel", file("inf.fits", -32, []int{4, 3, 3, 2}, nil, f32(72, map[int]float32{5: inf})), "channel 1 (focused) frame 1: 1 of the 4×3 pixels (8.3 %) are undefined (NaN, Inf, BLANK) or marked bad, the first at (x=2, y=2)"},
		{"BLANK pixel", file("blank.fits", 16, []int{2, 1, 1, 2}, []fits.Card{{Key: "BLANK", Value: -32768}}, []byte{0, 1, 0x80, 0, 0, 3, 0, 4}), "channel 1 (focused) frame 1: 1 of the 2×1 pixels (50.0 %) are undefined (NaN, Inf, BLANK) or marked bad, the first at (x=2, y=1)"},
		{"bad BITPIX", file("bitpix.fits", 24, []int{1, 1, 1, 2}, nil, make([]byte, 6)), "BITPIX = 24"},
		{"wavelength without unit", file("wave.fits", -32, []int{1, 1, 1, 2}, []fits.Card{{Key: "WAVELNTH", Value: 600}}, f32(2, nil)), "WAVEUNIT"},
		{"non-square pixels", file("cdelt.fits", -32, []int{1, 1, 1, 2}, []fits.Card{{Key: "CDELT1", Value: 0.1}, {Key: "CDELT2", Value: 0.2}, {Key: "CUNIT1", Value: "arcsec"}, {Key: "CUNIT2", Value: "arcsec"}}, f32(2, nil)), "not square"},
		{"unknown CUNIT", file("cunit.fits", -32, []int{1, 1, 1, 2}, []fits.Card{{Key: "CDELT1", Value: 0.1}, {Key: "CUNIT1", Value: "furlong"}}, f32(2, nil)), "CUNIT1"},
		{"newer contract", file("ver.fits", -32, []int{1, 1, 1, 2}, []fits.Card{{Key: "BURSTVER", Value: 2}}, f32(2, nil)), "BURSTVER"},
		{"truth rows", withTruth(2), "2 rows for 3 frames"},
		{"NAXIS huge", bytesFile("huge.fits", hugeHeader()), "truncated"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			b, err := Read(tc.path)
			if err == nil {
				t.Fatalf("no error; got %d×%d×%d", b.Nx, b.Ny, b.Frames)
			}
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %q does not mention %q", err, tc.want)
			}
			if !strings.Contains(err.Error(), filepath.Base(tc.path)) {
				t.Errorf("error %q does not name the file", err)
			}
		})
	}
}

// hugeHeader declares a 2^60-byte data unit in a one-block file.
func hugeHeader() []byte {
	cards := []fits.Card{{Key: "SIMPLE", Value: true}, {Key: "BITPIX", Value: -64}, {Key: "NAXIS", Value: 4}}
	for i, a := range []int{1 << 20, 1 << 20, 1 << 17, 2} {
		cards = append(cards, fits.Card{Key: "NAXIS" + strconv.Itoa(i+1), Value: a})
	}
	h, err := fits.EncodeHeader(cards)
	if err != nil {
		panic(err)
	}
	return h
}

// blockSize is the FITS block (FITS Standard 4.0 §3.1).
const blockSize = 2880

func TestReadPairBad(t *testing.T) {
	dir := t.TempDir()
	mk := func(name string, dims []int) string {
		n := 1
		for _, d := range dims {
			n *= d
		}
		p := filepath.Join(dir, name)
		if err := fits.WriteFile(p, &fits.Image{Dims: dims, Data: make([]float64, n)}); err != nil {
			t.Fatal(err)
		}
		return p
	}
	a := mk("a.fits", []int{4, 4, 3})
	cases := []struct {
		name, f, d, want string
	}{
		{"size mismatch", a, mk("b.fits", []int{4, 5, 3}), "4×4 with 3 frames but"},
		{"frames mismatch", a, mk("c.fits", []int{4, 4, 2}), "with 2 frames"},
		{"two-channel file", a, mk("d.fits", []int{4, 4, 3, 2}), "read it with Read"},
		{"2-D file is one frame", a, mk("e.fits", []int{4, 4}), "4×4 with 1 frames"},
		{"missing", a, filepath.Join(dir, "nope.fits"), "channel 2 (defocused)"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ReadPair(tc.f, tc.d)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v, want mention of %q", err, tc.want)
			}
		})
	}
}

func TestWriteErrors(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "out.fits")
	b := testBurst(4, 4, 2, 3)
	b.Data[1][1][5] = math.NaN()
	if err := Write(path, b, nil); err == nil || !strings.Contains(err.Error(), "channel 2 (defocused) frame 2") {
		t.Errorf("NaN burst: %v", err)
	}
	b = testBurst(4, 4, 2, 3)
	b.Truth.Coeffs[1] = b.Truth.Coeffs[1][:2]
	if err := Write(path, b, nil); err == nil || !strings.Contains(err.Error(), "truth frame 2") {
		t.Errorf("short truth row: %v", err)
	}
	for name, hdus := range map[string][]fits.HDU{
		"table first":   {&fits.Table{Name: "X", Columns: []fits.Column{{Name: "A", Int: []int64{1}}}}},
		"bad key":       {&fits.Image{Dims: []int{1}, Data: []float64{1}, Cards: []fits.Card{{Key: "lower", Value: 1}}}},
		"NaN card":      {&fits.Image{Dims: []int{1}, Data: []float64{1}, Cards: []fits.Card{{Key: "X", Value: math.NaN()}}}},
		"size mismatch": {&fits.Image{Dims: []int{2, 2}, Data: []float64{1}}},
		"ragged column": {&fits.Image{}, &fits.Table{Name: "T", Columns: []fits.Column{{Name: "A", Float: [][]float64{{1, 2}, {3}}}}}},
		"two sets":      {&fits.Image{}, &fits.Table{Name: "T", Columns: []fits.Column{{Name: "A", Int: []int64{1}, Text: []string{"a"}}}}},
		"unnamed ext":   {&fits.Image{}, &fits.Image{Dims: []int{1}, Data: []float64{1}}},
	} {
		if err := fits.WriteFile(path, hdus...); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
	if _, err := os.Stat(path); !os.IsNotExist(err) {
		t.Errorf("failed writes left %s behind", path)
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 0 {
		t.Errorf("failed writes left files: %v", entries)
	}
	// An existing file survives a failed write untouched.
	if err := os.WriteFile(path, []byte("old"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := fits.WriteFile(path, &fits.Image{Dims: []int{2}, Data: []float64{1}}); err == nil {
		t.Error("no error")
	}
	if got, _ := os.ReadFile(path); string(got) != "old" {
		t.Errorf("existing file changed to %q", got)
	}
}

var longValue = strings.Repeat("a long value with 'quotes', ", 6) + "end"

// TestLongStringQuotes: a long string whose doubled quotes are followed by
// blanks survives Write/Read (FITS Standard 4.0 §4.2.1.2).
func TestLongStringQuotes(t *testing.T) {
	path := filepath.Join(t.TempDir(), "q.fits")
	v := strings.Repeat("it's 'quoted' here ", 9)
	b := testBurst(2, 2, 1, 1)
	b.Cards = []fits.Card{{Key: "NOTE", Value: v}, {Key: "SHORT", Value: "x"}}
	if err := Write(path, b, nil); err != nil {
		t.Fatal(err)
	}
	out, err := Read(path)
	if err != nil {
		t.Fatal(err)
	}
	if got, _ := cardValue(out.Cards, "NOTE"); got != strings.TrimRight(v, " ") {
		t.Errorf("NOTE = %q\nwant %q", got, v)
	}
	if got, _ := cardValue(out.Cards, "SHORT"); got != "x" {
		t.Errorf("SHORT = %q", got)
	}
}

// productHDUs exercises everything WriteFile can write.
func productHDUs() []fits.HDU {
	// No quote is followed by a space: astropy 5.2.1 cuts a CONTINUE piece
	// at "'' " (a doubled quote then a blank), although the card is valid
	// under FITS Standard 4.0 §4.2.1.2. fitsio and Read handle it (see
	// TestLongStringQuotes).
	long := longValue
	return []fits.HDU{
		&fits.Image{Dims: []int{5, 4}, Data: make([]float64, 20), Cards: []fits.Card{
			{Key: "LONGSTR", Value: long, Comment: "continued over several cards"},
			{Key: "BIGINT", Value: int64(1) << 40},
			{Key: "TINY", Value: 6e-7},
			{Key: "HUGE", Value: -1.5e300},
			{Key: "COMMENT", Comment: strings.Repeat("wrapped commentary ", 10)},
			{Key: "NAXIS", Value: 7}, // structural: ignored
		}},
		&fits.Table{Name: "PATCHES", Columns: []fits.Column{
			{Name: "COEFFS", Unit: "rad", Float: [][]float64{{1, 2, 3}, {4, 5, math.NaN()}}},
			{Name: "INDEX", Int: []int64{7, -8}},
			{Name: "LABEL", Text: []string{"x", "longer label"}},
		}, Cards: []fits.Card{{Key: "BASIS", Value: "zernike"}}},
		&fits.Image{Name: "MAP", Dims: []int{3, 2, 2}, Data: []float64{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, math.Inf(-1)}},
		&fits.Table{Name: "EMPTY", Columns: []fits.Column{{Name: "V", Float: [][]float64{}}}},
	}
}

func TestWriteFileLongString(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "p.fits")
	if err := fits.WriteFile(path, productHDUs()...); err != nil {
		t.Fatal(err)
	}
	data, _ := os.ReadFile(path)
	ff, err := fits.Decode(data, fits.Limits{})
	if err != nil {
		t.Fatal(err)
	}
	if len(ff.HDUs) != 4 {
		t.Fatalf("%d HDUs, want 4", len(ff.HDUs))
	}
	// CONTINUE cards are read back into one string.
	if c, ok := ff.HDUs[0].Header.Get("LONGSTR"); !ok || c.Value != longValue {
		t.Errorf("LONGSTR = %#v", c)
	}
	if c, ok := ff.HDUs[0].Header.Get("BIGINT"); !ok || c.Value != 1<<40 {
		t.Errorf("BIGINT = %#v", c)
	}
}

// needTool returns the path of an external checker, skipping the test if
// it is missing outside CI and failing it in CI.
func needTool(t *testing.T, path string) {
	t.Helper()
	if _, err := os.Stat(path); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s is required in CI: %v", path, err)
		}
		t.Skipf("%s not installed", path)
	}
}

// TestFitsverify: written files must pass NASA's fitsverify with no errors
// and no warnings (FITS Standard 4.0, IAU FITS Working Group 2016;
// DEVELOPERS.md "Tests").
func TestFitsverify(t *testing.T) {
	const tool = "/usr/bin/fitsverify"
	needTool(t, tool)
	dir := t.TempDir()
	burstPath := filepath.Join(dir, "burst.fits")
	if err := Write(burstPath, testBurst(9, 7, 3, 5), fits.Provenance("0.0-test", map[string]string{"site": strings.Repeat("/very/long/path", 8) + ".yaml", "seed": "7"})); err != nil {
		t.Fatal(err)
	}
	prodPath := filepath.Join(dir, "product.fits")
	if err := fits.WriteFile(prodPath, productHDUs()...); err != nil {
		t.Fatal(err)
	}
	// A burst with no carried cards (only the optics keywords) and one
	// channel of a pair.
	plainPath := filepath.Join(dir, "plain.fits")
	plain := testBurst(4, 4, 2, 2)
	plain.Cards, plain.Truth, plain.Object = nil, nil, nil
	if err := Write(plainPath, plain, nil); err != nil {
		t.Fatal(err)
	}
	chanPath := filepath.Join(dir, "chan.fits")
	if err := fits.WriteFile(chanPath, &fits.Image{Dims: []int{4, 4, 3}, Data: make([]float64, 48), Cards: []fits.Card{{Key: "DIVPV", Value: 1.0}}}); err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{burstPath, prodPath, plainPath, chanPath} {
		out, err := exec.Command(tool, "-q", p).CombinedOutput()
		s := string(out)
		if err != nil || !strings.Contains(s, "verification OK") || strings.Contains(s, "warning") {
			t.Errorf("fitsverify %s: %v\n%s", filepath.Base(p), err, s)
			full, _ := exec.Command(tool, p).CombinedOutput()
			t.Log(string(full))
		}
	}
}

// TestAstropy: written files read back in astropy with the same values, and
// an unsigned 16-bit file written by astropy reads back here.
func TestAstropy(t *testing.T) {
	const py = "/usr/bin/python3"
	needTool(t, py)
	if err := exec.Command(py, "-c", "import astropy.io.fits").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("astropy is required in CI: %v", err)
		}
		t.Skip("astropy not installed")
	}
	dir := t.TempDir()
	burstPath := filepath.Join(dir, "burst.fits")
	in := testBurst(9, 7, 3, 5)
	if err := Write(burstPath, in, fits.Provenance("0.0-test", nil)); err != nil {
		t.Fatal(err)
	}
	prodPath := filepath.Join(dir, "product.fits")
	if err := fits.WriteFile(prodPath, productHDUs()...); err != nil {
		t.Fatal(err)
	}
	u16Path := filepath.Join(dir, "u16.fits")
	script := `
import sys, numpy as np
from astropy.io import fits
b, p, u = sys.argv[1:4]
with fits.open(b) as h:
    d = h[0].data
    assert d.shape == (2, 3, 7, 9), d.shape
    assert d.dtype.kind == 'f'
    hd = h[0].header
    print(repr(float(d[1, 2, 6, 8])), repr(float(d[0, 0, 0, 0])))
    print(hd['BURSTVER'], hd['WAVELNTH'], hd['WAVEUNIT'], hd['CUNIT1'], hd['CDELT1'], hd['TELDIAM'], hd['DIVPV'], hd['OBSERVER'])
    t = h['TRUTH']
    print(t.header['BASIS'], t.header['NMODES'], t.data['COEFFS'].shape, repr(float(t.data['COEFFS'][2][4])), t.columns['COEFFS'].unit)
    o = h['OBJECT'].data
    print(o.shape, repr(float(o[6, 8])))
with fits.open(p) as h:
    print(h[0].header['LONGSTR'])
    t = h['PATCHES'].data
    print(list(t['INDEX']), list(t['LABEL']), repr(float(t['COEFFS'][1][1])), h['MAP'].data.shape, len(h['EMPTY'].data))
a = (np.arange(2*3*4*5) * 2113 % 65536).astype(np.uint16).reshape(2, 3, 4, 5)
fits.PrimaryHDU(a).writeto(u)
`
	out, err := exec.Command(py, "-c", script, burstPath, prodPath, u16Path).CombinedOutput()
	if err != nil {
		t.Fatalf("astropy: %v\n%s", err, out)
	}
	lines := strings.Split(strings.TrimSpace(string(out)), "\n")
	want := []string{
		strconv.FormatFloat(in.Data[1][2][6*9+8], 'f', 3, 64) + " " + strconv.FormatFloat(in.Data[0][0][0], 'f', 1, 64),
		"1 600.0 -9 arcsec -0.12 0.5 1.0 O'Neill",
		"kl 5 (3, 5) " + strconv.FormatFloat(in.Truth.Coeffs[2][4], 'g', -1, 64) + " rad",
		"(7, 9) " + strconv.FormatFloat(in.Object[6*9+8], 'f', 1, 64),
		longValue,
		"[7, -8] ['x', 'longer label'] 5.0 (2, 2, 3) 0",
	}
	if len(lines) != len(want) {
		t.Fatalf("astropy printed %d lines, want %d:\n%s", len(lines), len(want), out)
	}
	for i := range want {
		// numpy may print integers as np.int64(7); normalise.
		got := strings.NewReplacer("np.int64(", "", "np.str_(", "", ")", "", "(", "").Replace(lines[i])
		w := strings.NewReplacer(")", "", "(", "").Replace(want[i])
		if got != w {
			t.Errorf("astropy line %d:\n got %s\nwant %s", i+1, lines[i], want[i])
		}
	}
	// The astropy file: NAXIS4 = 2, BITPIX 16, BZERO 32768.
	b, err := Read(u16Path)
	if err != nil {
		t.Fatal(err)
	}
	k := 0
	for c := 0; c < 2; c++ {
		for f := 0; f < 3; f++ {
			for i, v := range b.Data[c][f] {
				if want := float64((k * 2113) % 65536); v != want {
					t.Fatalf("astropy uint16: channel %d frame %d pixel %d = %v, want %v", c, f, i, v, want)
				}
				k++
			}
		}
	}
}
