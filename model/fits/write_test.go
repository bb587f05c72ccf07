package fits

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestASCIIHeaders: header text is printable ASCII only (FITS Standard 4.0
// §4.1.2.3), in values, comments, HISTORY and long CONTINUE'd strings
// alike: non-ASCII characters are transliterated ('×' as "x", '–' as "-",
// 'µ' as "u", '²' as "2", 'ü' as "u", '∞' as "inf"), a control character
// becomes a blank, a character without transliteration its code point,
// and nothing becomes '?'. Planted: writing '?' for characters the table
// lacks, and dropping the conversion of comments, each fail.
func TestASCIIHeaders(t *testing.T) {
	long := strings.Repeat("field 64×64 px – ", 8)
	cards := append(Provenance("1.0–β", map[string]string{"patch": "64×64 px", "site": "Zürich–∞"}),
		Card{Key: "OBJNAME", Value: "spot × 2", Comment: "5 µm², Ångström\tÅ"},
		Card{Key: "SNOW", Value: "a☃b\x01c"},
		Card{Key: "LONGTXT", Value: long, Comment: "r₀ ≈ 7 cm"},
		Card{Key: "COMMENT", Comment: "Axes: x × y – ½"})
	p := filepath.Join(t.TempDir(), "a.fits")
	if err := WriteFile(p, &Image{Dims: []int{1}, Data: []float64{0}, Cards: cards}); err != nil {
		t.Fatal(err)
	}
	data, _ := os.ReadFile(p)
	data = data[:blockSize] // the header: one block here
	for i, c := range data {
		if c < 32 || c > 126 {
			t.Fatalf("byte %d of the header is %#x, not printable ASCII", i, c)
		}
		if c == '?' {
			t.Fatalf("byte %d of the header is '?': %q", i, data[i/cardSize*cardSize:i/cardSize*cardSize+cardSize])
		}
	}
	s := string(data)
	for _, want := range []string{"pdwave: patch = 64x64 px", "pdwave: site = Zurich-inf", "'1.0-beta'",
		"'spot x 2'", "5 um2, Angstrom A", "'aU+2603b c'", "field 64x64 px - field", "r0 ~ 7 cm", "COMMENT Axes: x x y - 1/2"} {
		if !strings.Contains(s, want) {
			t.Errorf("header lacks %q", want)
		}
	}
}
