package fits

import (
	"bytes"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// needFitsverify skips the test when fitsverify is missing outside CI and
// fails it in CI (DEVELOPERS.md, "Tests").
func needFitsverify(t *testing.T) string {
	t.Helper()
	const tool = "/usr/bin/fitsverify"
	if _, err := os.Stat(tool); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s is required in CI: %v", tool, err)
		}
		t.Skipf("%s not installed", tool)
	}
	return tool
}

// checksumHDUs is a file of every kind of HDU WriteFile writes: a primary
// image, an image extension and a binary table with a long string card.
func checksumHDUs() []HDU {
	r := rand.New(rand.NewPCG(3, 4))
	img := make([]float64, 7*5*3)
	for i := range img {
		img[i] = r.NormFloat64() * 1e3
	}
	ext := make([]float64, 9*4)
	for i := range ext {
		ext[i] = float64(i) - 17.25
	}
	rows := make([][]float64, 6)
	for i := range rows {
		rows[i] = []float64{float64(i), r.Float64(), -r.Float64()}
	}
	return []HDU{
		&Image{Dims: []int{7, 5, 3}, Data: img, Cards: Provenance("0.0-test", map[string]string{"site": strings.Repeat("/long/path", 9)})},
		&Image{Name: "SECOND", Dims: []int{9, 4}, Data: ext},
		&Table{Name: "COEFFS", Columns: []Column{
			{Name: "FRAME", Int: []int64{1, 2, 3, 4, 5, 6}},
			{Name: "NATIVE", Unit: "rad", Float: rows},
			{Name: "LABEL", Text: []string{"a", "bb", "ccc", "", "e", "it's"}},
		}},
	}
}

// TestChecksumEncoding: the 16-character encoding equals astropy's
// (_ValidHDU._char_encode, astropy's implementation of the proposal's
// char_encode) for edge values and random ones. Planted: dropping the
// one-character rotation fails here.
func TestChecksumEncoding(t *testing.T) {
	py := needAstropy(t)
	vals := []uint32{0, 1, 0xffffffff, 0xfffffffe, 0x12345678, 0x80000000, 0x3a3a3a3a, 0x5b5b5b5b, 0xe8e8e8e8}
	r := rand.New(rand.NewPCG(1, 2))
	for len(vals) < 300 {
		vals = append(vals, r.Uint32())
	}
	var list []string
	for _, v := range vals {
		list = append(list, strconv.FormatUint(uint64(v), 10))
	}
	script := `
import sys
from astropy.io import fits
hdu = fits.PrimaryHDU()
for v in sys.argv[1:]:
    print(hdu._char_encode(int(v)))
`
	out, err := exec.Command(py, append([]string{"-c", script}, list...)...).CombinedOutput()
	if err != nil {
		t.Fatalf("astropy: %v\n%s", err, out)
	}
	want := strings.Fields(string(out))
	if len(want) != len(vals) {
		t.Fatalf("astropy printed %d encodings for %d values", len(want), len(vals))
	}
	for i, v := range vals {
		if got := encodeChecksum(v); got != want[i] {
			t.Errorf("encodeChecksum(%#08x) = %q, astropy %q", v, got, want[i])
		}
	}
}

// TestChecksumWritten: every HDU WriteFile writes sums to negative zero
// (FITS 4.0 Appendix J), astropy's fits.open(checksum=True) accepts every
// HDU's CHECKSUM and DATASUM, astropy writing the same image data with
// writeto(checksum=True) gets the same DATASUM, and fitsverify (which
// checks both keywords) reports no error or warning. The negative control
// flips one data byte and every one of those checks must then fail.
// Planted: an encoding without the one-character rotation fails every
// check but the DATASUM comparison.
func TestChecksumWritten(t *testing.T) {
	py := needAstropy(t)
	tool := needFitsverify(t)
	dir := t.TempDir()
	p := filepath.Join(dir, "sum.fits")
	if err := WriteFile(p, checksumHDUs()...); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	for i, hdu := range splitHDUs(t, data) {
		if s, _ := hduSum(bytes.NewReader(hdu)); s != 0xffffffff {
			t.Errorf("HDU %d sums to %#08x, want 0xffffffff (negative zero)", i+1, s)
		}
	}
	checkAstropySums(t, py, p, true)
	checkFitsverify(t, tool, p, true)

	// Astropy's own DATASUM of the same float32 image data.
	ref := filepath.Join(dir, "ref.fits")
	script := `
import sys, numpy as np, warnings
from astropy.io import fits
warnings.simplefilter("error")
with fits.open(sys.argv[1]) as src:
    fits.PrimaryHDU(np.asarray(src[0].data, dtype=">f4")).writeto(sys.argv[2], checksum=True)
    print(fits.getheader(sys.argv[2])["DATASUM"], src[0].header["DATASUM"])
`
	out, err := exec.Command(py, "-c", script, p, ref).CombinedOutput()
	f := strings.Fields(string(out))
	if err != nil || len(f) != 2 {
		t.Fatalf("astropy writeto(checksum=True): %v\n%s", err, out)
	}
	if f[0] != f[1] {
		t.Errorf("DATASUM = %s, astropy writes %s for the same data", f[1], f[0])
	}

	// Negative control: one data byte flipped.
	bad := filepath.Join(dir, "flipped.fits")
	flipped := append([]byte(nil), data...)
	flipped[blockSize+5] ^= 0x10 // the primary image's data starts after one header block
	if err := os.WriteFile(bad, flipped, 0o644); err != nil {
		t.Fatal(err)
	}
	if s, _ := hduSum(bytes.NewReader(splitHDUs(t, flipped)[0])); s == 0xffffffff {
		t.Error("the flipped file still sums to negative zero")
	}
	checkAstropySums(t, py, bad, false)
	checkFitsverify(t, tool, bad, false)
}

// splitHDUs cuts a file written by WriteFile into its HDUs (header to its
// END card, data size from BITPIX, NAXISn, PCOUNT and GCOUNT, FITS 4.0
// §4.4.1.1 eq. 2, both padded to blocks).
func splitHDUs(t *testing.T, data []byte) [][]byte {
	t.Helper()
	var out [][]byte
	for len(data) > 0 {
		end := -1
		for i := 0; i+cardSize <= len(data); i += cardSize {
			if strings.TrimRight(string(data[i:i+cardSize]), " ") == "END" {
				end = i + cardSize
				break
			}
		}
		if end < 0 {
			t.Fatal("no END card")
		}
		h := ParseHeader(data[:end])
		get := func(k string, def int) int {
			v, ok, err := h.Int(k)
			if err != nil {
				t.Fatal(err)
			}
			if !ok {
				return def
			}
			return v
		}
		n := 0
		if naxis := get("NAXIS", 0); naxis > 0 {
			n = 1
			for i := 1; i <= naxis; i++ {
				n *= get("NAXIS"+strconv.Itoa(i), 0)
			}
		}
		bitpix := get("BITPIX", 8)
		size := roundBlock(end) + roundBlock(max(bitpix, -bitpix)/8*get("GCOUNT", 1)*(get("PCOUNT", 0)+n))
		if size > len(data) {
			t.Fatalf("HDU of %d bytes in %d bytes", size, len(data))
		}
		out, data = append(out, data[:size]), data[size:]
	}
	return out
}

// checkAstropySums opens path with astropy's checksum verification and
// checks that every HDU's CHECKSUM and DATASUM verify (ok) or that some do
// not (!ok).
func checkAstropySums(t *testing.T, py, path string, ok bool) {
	t.Helper()
	script := `
import sys, warnings
from astropy.io import fits
with warnings.catch_warnings(record=True) as w:
    warnings.simplefilter("always")
    with fits.open(sys.argv[1], checksum=True) as hdul:
        res = [(h.verify_checksum(), h.verify_datasum()) for h in hdul]
print(len(hdul), res, len([x for x in w if "checksum" in str(x.message).lower() or "datasum" in str(x.message).lower()]))
`
	out, err := exec.Command(py, "-c", script, path).CombinedOutput()
	if err != nil {
		t.Fatalf("astropy %s: %v\n%s", filepath.Base(path), err, out)
	}
	s := strings.TrimSpace(string(out))
	good := s == "3 [(1, 1), (1, 1), (1, 1)] 0"
	if good != ok {
		t.Errorf("astropy verification of %s (want valid %v): %s", filepath.Base(path), ok, s)
	}
}

// checkFitsverify runs fitsverify on path: no error or warning (ok), or a
// reported checksum error (!ok).
func checkFitsverify(t *testing.T, tool, path string, ok bool) {
	t.Helper()
	out, err := exec.Command(tool, path).CombinedOutput()
	s := string(out)
	clean := err == nil && strings.Contains(s, "0 warning(s) and 0 error(s)")
	if ok && !clean {
		t.Errorf("fitsverify %s: %v\n%s", filepath.Base(path), err, s)
	}
	if !ok && (clean || !strings.Contains(strings.ToLower(s), "checksum")) {
		t.Errorf("fitsverify accepts %s or does not name the checksum:\n%s", filepath.Base(path), s)
	}
}
