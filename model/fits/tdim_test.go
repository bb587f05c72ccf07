package fits

import (
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestTDIM: a Float column with Dims{modes, frames} (frame-major cells,
// the mode varying fastest) gets TDIMn = '(modes,frames)' (FITS Standard
// 4.0 §7.3.2: the first axis varies fastest), which astropy reads as shape
// (rows, frames, modes) with cell[r][f][m] in place; fitsverify accepts
// the table, an empty one included. Planted: writing the axes in the
// other order fails the shape and value checks.
func TestTDIM(t *testing.T) {
	py := needAstropy(t)
	tool := needFitsverify(t)
	const rows, frames, nmodes = 3, 2, 4
	cells := make([][]float64, rows)
	for r := range cells {
		for f := 0; f < frames; f++ {
			for m := 0; m < nmodes; m++ {
				cells[r] = append(cells[r], float64(100*r+10*f+m))
			}
		}
	}
	dir := t.TempDir()
	p := filepath.Join(dir, "tdim.fits")
	empty := filepath.Join(dir, "empty.fits")
	col := func(c [][]float64) []HDU {
		return []HDU{&Image{}, &Table{Name: "PATCHES", Columns: []Column{{Name: "COEFFS", Unit: "rad", Float: c, Dims: []int{nmodes, frames}}}}}
	}
	if err := WriteFile(p, col(cells)...); err != nil {
		t.Fatal(err)
	}
	if err := WriteFile(empty, col([][]float64{})...); err != nil {
		t.Fatal(err)
	}
	script := `
import sys
from astropy.io import fits
with fits.open(sys.argv[1]) as h:
    c = h[1].data['COEFFS']
    print(h[1].header['TDIM1'], c.shape, c[2][1][3], c[1][0][2])
with fits.open(sys.argv[2]) as h:
    print(h[1].header['TFORM1'], h[1].data['COEFFS'].shape)
`
	out, err := exec.Command(py, "-c", script, p, empty).CombinedOutput()
	if err != nil {
		t.Fatalf("astropy: %v\n%s", err, out)
	}
	want := "(4,2) (3, 2, 4) 213.0 102.0\n8D (0, 2, 4)"
	if got := strings.TrimSpace(string(out)); got != want {
		t.Errorf("astropy reads\n%s\nwant\n%s", got, want)
	}
	checkFitsverify(t, tool, p, true)
	checkFitsverify(t, tool, empty, true)

	for _, dims := range [][]int{{3, 2}, {0, 8}, {}} {
		bad := []HDU{&Image{}, &Table{Name: "T", Columns: []Column{{Name: "C", Float: cells, Dims: dims}}}}
		if err := WriteFile(filepath.Join(dir, "bad.fits"), bad...); err == nil {
			t.Errorf("Dims %v for cells of %d values: no error", dims, frames*nmodes)
		}
	}
	if err := WriteFile(filepath.Join(dir, "bad.fits"), &Image{}, &Table{Name: "T", Columns: []Column{{Name: "C", Int: []int64{1}, Dims: []int{1}}}}); err == nil {
		t.Error("Dims on an Int column: no error")
	}
}
