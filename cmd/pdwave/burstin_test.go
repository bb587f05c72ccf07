package main

import (
	"bytes"
	"compress/gzip"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// csvRows returns the data lines of a coefficient CSV (comment lines, which
// hold the command and input names, left out).
func csvRows(t *testing.T, path string) string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var rows []string
	for _, l := range strings.Split(string(b), "\n") {
		if !strings.HasPrefix(l, "#") {
			rows = append(rows, l)
		}
	}
	return strings.Join(rows, "\n")
}

// TestBurstLayoutsCLI: predict reads the same burst from every layout the
// reader accepts (a 4-D file; a focused and a defocused file joined with
// '+'; a file per channel and frame; the channels in image extensions,
// chosen by default or with --hdu; the file gzip-compressed) and gives the
// same coefficients. A wrong --hdu is one clear error. Planted: --hdu not
// passed to the reader makes the swapped-extension case give the other
// channel order and fail.
func TestBurstLayoutsCLI(t *testing.T) {
	dir := t.TempDir()
	p := func(name string) string { return filepath.Join(dir, name) }
	const n, frames = 64, 2
	good := noise(n*n*frames*2, 3)
	writeFITS(t, p("burst.fits"), []int{n, n, frames, 2}, good, demoOptics, 0)
	writeFITS(t, p("f.fits"), []int{n, n, frames}, good[:n*n*frames], demoOptics, 0)
	writeFITS(t, p("d.fits"), []int{n, n, frames}, good[n*n*frames:], demoOptics, 0)
	var perFrame []string
	for c := 0; c < 2; c++ {
		for f := 0; f < frames; f++ {
			name := p("c" + string(rune('1'+c)) + "f" + string(rune('1'+f)) + ".fits")
			k := (c*frames + f) * n * n
			writeFITS(t, name, []int{n, n}, good[k:k+n*n], demoOptics, 0)
			perFrame = append(perFrame, name)
		}
	}
	// Extensions: an empty primary HDU with the optics, then the
	// defocused channel first (EXTNAME DEFOC), then the focused (FOC).
	ext := func(name string, pix []float32) []byte {
		writeFITS(t, p("tmp.fits"), []int{n, n, frames}, pix, [][2]any{{"EXTNAME", name}}, 0)
		b, _ := os.ReadFile(p("tmp.fits"))
		b = bytes.Replace(b, []byte("SIMPLE  =                    T"), []byte("XTENSION= 'IMAGE   '          "), 1)
		// PCOUNT and GCOUNT go after NAXIS3 (card 6): insert two cards.
		cards := []byte(strings.Repeat(" ", 160))
		copy(cards, "PCOUNT  =                    0")
		copy(cards[80:], "GCOUNT  =                    1")
		hdr := append(append(append([]byte(nil), b[:6*80]...), cards...), b[6*80:2880-160]...)
		return append(hdr, b[2880:]...)
	}
	writeFITS(t, p("primary.fits"), nil, nil, append([][2]any{{"EXTEND", true}}, demoOptics...), 0)
	prim, _ := os.ReadFile(p("primary.fits"))
	swapped := append(append(append([]byte(nil), prim...), ext("DEFOC", good[n*n*frames:])...), ext("FOC", good[:n*n*frames])...)
	if err := os.WriteFile(p("ext.fits"), swapped, 0o644); err != nil {
		t.Fatal(err)
	}
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write(swapped)
	zw.Close()
	if err := os.WriteFile(p("ext.fits.gz"), gz.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	predict := func(out string, args ...string) string {
		t.Helper()
		code, _, stderr := runCLI(t, repo, append([]string{"predict", "--out", p(out)}, args...)...)
		if code != 0 {
			t.Fatalf("predict %v: exit %d\n%s", args, code, stderr)
		}
		return csvRows(t, p(strings.TrimSuffix(out, ".fits")+".csv"))
	}
	want := predict("ref.fits", p("burst.fits"))
	for name, args := range map[string][]string{
		"pair joined with +":   {p("f.fits") + "+" + p("d.fits")},
		"channel and frame":    {strings.Join(perFrame, "+")},
		"extensions by --hdu":  {p("ext.fits"), "--hdu", "FOC,DEFOC"},
		"extensions by index":  {p("ext.fits"), "--hdu", "2,1"},
		"gzip and --hdu names": {p("ext.fits.gz"), "--hdu", "foc,defoc"},
	} {
		if got := predict(strings.ReplaceAll(name, " ", "_")+".fits", args...); got != want {
			t.Errorf("%s: coefficients differ from the 4-D file's", name)
		}
	}
	// Without --hdu the extensions are read in file order: the channels
	// swapped, so the coefficients must differ.
	if got := predict("swapped.fits", p("ext.fits")); got == want {
		t.Error("swapped extensions read without --hdu give the 4-D file's coefficients")
	}
	code, _, stderr := runCLI(t, repo, "predict", p("ext.fits"), "--hdu", "NOPE", "--out", p("x.fits"))
	if code == 0 || !strings.Contains(stderr, "DEFOC, FOC") || strings.Count(stderr, "pdwave: ") != 1 {
		t.Errorf("--hdu NOPE: exit %d, stderr %q; want one error naming the extensions", code, stderr)
	}
}
