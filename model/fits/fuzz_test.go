package fits

import (
	"os"
	"path/filepath"
	"testing"
)

// FuzzDecode: Decode and the decoders of every HDU (images, tile-compressed
// images, table columns) return an error, never panic nor allocate beyond
// the limit, whatever the bytes. Seeded with the compressed files of
// testdata (written by astropy, see testdata/compress.py), their gzip-free
// halves and a product of WriteFile.
func FuzzDecode(f *testing.F) {
	seeds, _ := filepath.Glob("testdata/*.fits")
	for _, p := range seeds {
		data, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
		f.Add(data[:len(data)/2])
	}
	p := filepath.Join(f.TempDir(), "p.fits")
	if err := WriteFile(p, &Image{Dims: []int{3, 2}, Data: make([]float64, 6)},
		&Table{Name: "T", Columns: []Column{{Name: "COEFFS", Float: [][]float64{{1, 2}, {3, 4}}}}}); err != nil {
		f.Fatal(err)
	}
	if data, err := os.ReadFile(p); err == nil {
		f.Add(data)
	}
	lim := Limits{MaxBytes: 1 << 24}
	f.Fuzz(func(t *testing.T, data []byte) {
		ff, err := Decode(data, lim)
		if err != nil {
			return
		}
		for _, u := range ff.HDUs {
			u.ImageAxes()
			if px, err := u.Image(); err == nil {
				ax, _ := u.ImageAxes()
				n := 1
				for _, a := range ax {
					n *= a
				}
				if len(ax) > 0 && len(px) != n {
					t.Errorf("%s: %d pixels for axes %v", u, len(px), ax)
				}
			}
			u.FloatColumn("COEFFS")
		}
	})
}
