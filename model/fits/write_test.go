package fits

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestASCIIHeaders: header text is printable ASCII only (FITS Standard 4.0
// §4.1.2.3): pdwave's own '×' is written as "x", other non-ASCII characters
// as '?'. Planted: writing '?' for '×' fails.
func TestASCIIHeaders(t *testing.T) {
	cards := append(Provenance("1.0", map[string]string{"patch": "64×64 px", "site": "Zürich–∞"}),
		Card{Key: "OBJNAME", Value: "spot × 2", Comment: "5 µm"})
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
	}
	s := string(data)
	for _, want := range []string{"pdwave: patch = 64x64 px", "pdwave: site = Zurich-?", "'spot x 2'", "5 um"} {
		if !strings.Contains(s, want) {
			t.Errorf("header lacks %q", want)
		}
	}
}
