package restore

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// header returns a FITS header of the given cards, END and blank padding to
// 2880 bytes (FITS Standard 4.0 §4.4).
func header(cards ...string) []byte {
	var b strings.Builder
	for _, c := range append(cards, "END") {
		fmt.Fprintf(&b, "%-80s", c)
	}
	for b.Len()%2880 != 0 {
		b.WriteByte(' ')
	}
	return []byte(b.String())
}

// TestPartHostileSizes checks that a part file whose table declares far
// more data than the file holds is refused with an error before the
// decoder allocates for it (fits.Open's size check). Planted: reading
// with fitsio alone asks for the declared 8 TB (the run dies out of
// memory or panics).
func TestPartHostileSizes(t *testing.T) {
	p := filepath.Join(t.TempDir(), "x.part-1-of-2.fits")
	data := append(header("SIMPLE  =                    T", "BITPIX  =                    8", "NAXIS   =                    0", "EXTEND  =                    T"),
		header("XTENSION= 'BINTABLE'", "BITPIX  =                    8", "NAXIS   =                    2", "NAXIS1  =                    8",
			"NAXIS2  =        1000000000000", "PCOUNT  =                    0", "GCOUNT  =                    1", "TFIELDS =                    1",
			"TTYPE1  = 'X       '", "TFORM1  = '1D      '", "EXTNAME = 'META    '")...)
	if err := os.WriteFile(p, append(data, make([]byte, 2880)...), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := openPart(p); err == nil {
		t.Fatal("a part declaring 8 TB in a 8 kB file was opened")
	}
}
