package burst

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

	"pdwave/model/fits"
)

// needAstropy skips without astropy outside CI and fails in CI.
func needAstropy(t *testing.T) string {
	t.Helper()
	const py = "/usr/bin/python3"
	needTool(t, py)
	if err := exec.Command(py, "-c", "import astropy.io.fits, numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("astropy is required in CI: %v", err)
		}
		t.Skip("astropy not installed")
	}
	return py
}

// TestAstropyCompressedLayouts reads bursts that astropy writes as an
// observatory might: (a) each channel its own tile-compressed extension
// (CompImageHDU, RICE_1 of uint16 camera data, channel 2 quantised
// float32 with SUBTRACTIVE_DITHER_2), the optics keywords in the primary
// header and DIVPV in the defocused extension; (b) a 4-D int32 burst in
// an image extension after an empty primary HDU; (c) the same as (a) gzip-compressed as a whole. Pixels
// must equal astropy's decoding. Planted: the defocused HDU not looked for
// (a burst of one channel) fails (a) with "one channel only".
func TestAstropyCompressedLayouts(t *testing.T) {
	py := needAstropy(t)
	dir := t.TempDir()
	script := `
import sys, gzip, shutil, numpy as np
from astropy.io import fits
d = sys.argv[1]
rng = np.random.default_rng(3)
f = (1000 + 100 * rng.random((4, 12, 10))).astype(np.uint16)   # frames, ny, nx
g = (500 + 50 * rng.random((4, 12, 10))).astype(np.float32)
g[1, 2, :3] = 0
ph = fits.PrimaryHDU()
ph.header['WAVELNTH'] = (630.25, 'nm')
ph.header['WAVEUNIT'] = 'nm'
ph.header['TELDIAM'] = 0.5
ph.header['CDELT1'] = 0.1
ph.header['CDELT2'] = 0.1
ph.header['CUNIT1'] = 'arcsec'
ph.header['CUNIT2'] = 'arcsec'
ph.header['DATE-OBS'] = '2024-05-12T08:00:01.5'
c1 = fits.CompImageHDU(f, compression_type='RICE_1', name='FOCUS')
c2 = fits.CompImageHDU(g, compression_type='GZIP_2', name='DEFOCUS', quantize_method=2, dither_seed=42)
c2.header['DIVPV'] = 1.0
fits.HDUList([ph, c1, c2]).writeto(d + '/a.fits')
both = np.stack([f.astype(np.int32), np.round(g).astype(np.int32)])  # channel, frame, ny, nx
fits.HDUList([fits.PrimaryHDU(), fits.ImageHDU(both, name='BURST')]).writeto(d + '/b.fits')
with open(d + '/a.fits', 'rb') as s, gzip.open(d + '/c.fits.gz', 'wb') as o:
    shutil.copyfileobj(s, o)
with fits.open(d + '/a.fits') as h:
    np.concatenate([h['FOCUS'].data.astype('<f8').ravel(), h['DEFOCUS'].data.astype('<f8').ravel()]).tofile(d + '/a.f64')
with fits.open(d + '/b.fits') as h:
    h['BURST'].data.astype('<f8').ravel().tofile(d + '/b.f64')
`
	if out, err := exec.Command(py, "-c", script, dir).CombinedOutput(); err != nil {
		t.Fatalf("astropy: %v\n%s", err, out)
	}
	for _, c := range []struct{ file, want string }{{"a.fits", "a.f64"}, {"b.fits", "b.f64"}, {"c.fits.gz", "a.f64"}} {
		t.Run(c.file, func(t *testing.T) {
			b, err := Read(filepath.Join(dir, c.file))
			if err != nil {
				t.Fatal(err)
			}
			want := readF64(t, filepath.Join(dir, c.want))
			if b.Nx != 10 || b.Ny != 12 || b.Frames != 4 || len(want) != 2*4*120 {
				t.Fatalf("burst %d×%d×%d, %d reference values", b.Nx, b.Ny, b.Frames, len(want))
			}
			k := 0
			for ch := 0; ch < 2; ch++ {
				for f := 0; f < 4; f++ {
					for i, v := range b.Data[ch][f] {
						if v != want[k] {
							t.Fatalf("channel %d frame %d pixel %d = %v, astropy %v", ch+1, f+1, i, v, want[k])
						}
						k++
					}
				}
			}
			if c.file != "b.fits" {
				o := b.Optics
				if !relClose(o.Wavelength.V, 630.25e-9, 1e-14) || o.Diameter.V != 0.5 || o.DiversityPV.V != 1 || !relClose(o.PixelScale.V, 0.1*arcsec, 1e-14) {
					t.Errorf("optics %+v", o)
				}
				if v, _ := cardValue(b.Cards, "DATE-OBS"); v != "2024-05-12T08:00:01.5" {
					t.Errorf("DATE-OBS = %v", v)
				}
				for _, cd := range b.Cards {
					if strings.HasPrefix(cd.Key, "Z") || strings.HasPrefix(cd.Key, "TTYPE") {
						t.Errorf("compression keyword %s carried", cd.Key)
					}
				}
			}
		})
	}
	// The channels chosen by name or index give the same burst.
	a, err := ReadFiles([]string{filepath.Join(dir, "a.fits")}, Options{HDUs: []string{"focus", "2"}})
	if err != nil {
		t.Fatal(err)
	}
	if a.Frames != 4 || a.Data[1][1][0] != readF64(t, filepath.Join(dir, "a.f64"))[4*120+120] {
		t.Errorf("HDUs by name and index: %d frames", a.Frames)
	}
	if _, err := ReadFiles([]string{filepath.Join(dir, "a.fits")}, Options{HDUs: []string{"NOPE"}}); err == nil || !strings.Contains(err.Error(), "FOCUS, DEFOCUS") {
		t.Errorf("unknown EXTNAME: %v, want the names the file has", err)
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

// TestReadFiles assembles bursts from several files: a frame per file
// (each holding both channels), a channel and a frame per file (the
// focused channel's files first), and refuses mismatched shapes and
// optics with errors naming the files. Planted: frames of the defocused
// channel taken from the focused files fails the pixel check.
func TestReadFiles(t *testing.T) {
	dir := t.TempDir()
	nx, ny := 4, 3
	pix := func(c, f, i int) float64 { return float64(1000*c + 100*f + i) }
	write := func(name string, dims []int, chans []int, frames []int, cards []fits.Card) string {
		var data []float64
		for _, c := range chans {
			for _, f := range frames {
				for i := 0; i < nx*ny; i++ {
					data = append(data, pix(c, f, i))
				}
			}
		}
		p := filepath.Join(dir, name)
		if err := fits.WriteFile(p, &fits.Image{Dims: dims, Data: data, Cards: cards}); err != nil {
			t.Fatal(err)
		}
		return p
	}
	div := []fits.Card{{Key: "DIVPV", Value: 1.0}}
	var perFrame, perChanFrame []string
	for f := 0; f < 3; f++ {
		perFrame = append(perFrame, write("f"+string(rune('0'+f))+".fits", []int{nx, ny, 1, 2}, []int{0, 1}, []int{f}, div))
	}
	for c := 0; c < 2; c++ {
		for f := 0; f < 3; f++ {
			perChanFrame = append(perChanFrame, write("c"+string(rune('0'+c))+"f"+string(rune('0'+f))+".fits", []int{nx, ny}, []int{c}, []int{f}, nil))
		}
	}
	for name, paths := range map[string][]string{"frame per file": perFrame, "channel and frame per file": perChanFrame} {
		b, err := ReadFiles(paths, Options{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if b.Frames != 3 {
			t.Fatalf("%s: %d frames", name, b.Frames)
		}
		for c := 0; c < 2; c++ {
			for f := 0; f < 3; f++ {
				for i, v := range b.Data[c][f] {
					if v != pix(c, f, i) {
						t.Fatalf("%s: channel %d frame %d pixel %d = %v, want %v", name, c+1, f+1, i, v, pix(c, f, i))
					}
				}
			}
		}
	}
	other := write("other.fits", []int{nx, ny, 1, 2}, []int{0, 1}, []int{0}, []fits.Card{{Key: "DIVPV", Value: 0.5}})
	small := filepath.Join(dir, "small.fits")
	if err := fits.WriteFile(small, &fits.Image{Dims: []int{2, 2, 1, 2}, Data: make([]float64, 8)}); err != nil {
		t.Fatal(err)
	}
	two := write("two.fits", []int{nx, ny, 2}, []int{0}, []int{0, 1}, nil)
	for _, c := range []struct {
		name  string
		paths []string
		want  string
	}{
		{"optics differ", []string{perFrame[0], other}, "DIVPV is 1 in"},
		{"sizes differ", []string{perFrame[0], small}, "small.fits 2×2"},
		{"kinds mixed", []string{perFrame[0], perChanFrame[0]}, "one only"},
		{"odd one-channel count", perChanFrame[:3], "3 one-channel files"},
		{"channels of unequal length", []string{two, perChanFrame[0], perChanFrame[3], perChanFrame[4]}, "focused channel has 3 frames in 2 files, the defocused 2"},
	} {
		if _, err := ReadFiles(c.paths, Options{}); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want mention of %q", c.name, err, c.want)
		}
	}
}

// TestGzipLimits: a gzip-compressed file is refused, with one clear error
// and before the buffer grows past it, when it decompresses to more than
// Limits.MaxBytes; a huge image declared by a compressed image's header is
// refused before allocating.
func TestGzipLimits(t *testing.T) {
	dir := t.TempDir()
	plain := filepath.Join(dir, "b.fits")
	if err := Write(plain, testBurst(64, 64, 4, 2), nil); err != nil {
		t.Fatal(err)
	}
	data, _ := os.ReadFile(plain)
	var gz bytes.Buffer
	w := gzip.NewWriter(&gz)
	w.Write(data)
	w.Close()
	p := filepath.Join(dir, "b.fits.gz")
	if err := os.WriteFile(p, gz.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	if b, err := Read(p); err != nil || b.Nx != 64 {
		t.Fatalf("gzip burst: %v", err)
	}
	_, err := ReadFiles([]string{p}, Options{Limits: fits.Limits{MaxBytes: int64(len(data) / 2)}})
	if err == nil || !strings.Contains(err.Error(), "limit") || !strings.Contains(err.Error(), "b.fits.gz") {
		t.Errorf("limit: %v", err)
	}
}

// TestIsFITSName: the names a folder of bursts is listed by.
func TestIsFITSName(t *testing.T) {
	for name, want := range map[string]bool{"a.fits": true, "A.FIT": true, "b.fts": true, "c.fz": true, "d.fits.gz": true,
		"e.gz": false, "f.txt": false, "fits": false} {
		if IsFITSName(name) != want {
			t.Errorf("IsFITSName(%q) = %v", name, !want)
		}
	}
}
