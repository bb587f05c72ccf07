package restore

import (
	"math"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestProductCoeffShape: the PATCHES table of a restored product gives its
// frame-major COEFFS and NOLL cells the shape frames × modes (TDIMn =
// '(modes,frames)', FITS Standard 4.0 §7.3.2, the fastest axis first), so
// astropy reads them as (patches, frames, modes) with each value in place.
// Planted: Dims{Frames, Modes} in Product.table fails the shape check.
func TestProductCoeffShape(t *testing.T) {
	needTool(t, "/usr/bin/python3", "-c", "import astropy.io.fits")
	const nx, ny, frames, nmodes = 8, 6, 3, 5
	coeffs := func(id int) []float64 {
		c := make([]float64, frames*nmodes)
		for f := 0; f < frames; f++ {
			for m := 0; m < nmodes; m++ {
				c[f*nmodes+m] = float64(100*id + 10*f + m) // frame-major (DEVELOPERS.md conventions)
			}
		}
		return c
	}
	nan := math.NaN()
	p := &Product{
		Meta: &Meta{Nx: nx, Ny: ny, Frames: frames, Patch: 4, Overlap: 2, Basis: "kl", Modes: nmodes,
			Estimator: "test", Mean: make([]float64, nx*ny), Settings: map[string]string{"command": "test"}},
		Image: make([]float64, nx*ny),
		Patches: []PatchResult{
			{ID: 0, Coeffs: coeffs(0), Noll: coeffs(0), Metric: nan, MetricRatio: nan, CoeffRMS: nan},
			{ID: 1, X0: 4, Coeffs: coeffs(1), Noll: coeffs(1), Metric: nan, MetricRatio: nan, CoeffRMS: nan},
		},
	}
	out := filepath.Join(t.TempDir(), "field.fits")
	if err := p.Write(out, "0.0-test"); err != nil {
		t.Fatal(err)
	}
	script := `
import sys
from astropy.io import fits
with fits.open(sys.argv[1]) as h:
    c, n = h["PATCHES"].data["COEFFS"], h["PATCHES"].data["NOLL"]
    print(c.shape, n.shape, c[1][2][4], c[0][1][3])
`
	got, err := exec.Command("/usr/bin/python3", "-c", script, out).CombinedOutput()
	if err != nil {
		t.Fatalf("astropy: %v\n%s", err, got)
	}
	if want := "(2, 3, 5) (2, 3, 5) 124.0 13.0"; strings.TrimSpace(string(got)) != want {
		t.Errorf("astropy reads %q, want %q", strings.TrimSpace(string(got)), want)
	}
}
